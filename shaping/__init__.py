"""Pure shaping core: operator requests in, limited body rates and wheel rates out. No clocks, threads, files or terminals."""
