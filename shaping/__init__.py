"""Pure shaping core: operator requests in, limited body rates and wheel rates out.

No clocks, threads, files or terminals here: the caller supplies every number and every time step.
"""
