"""The control loop's core without I/O: bytes and time in, bytes and a snapshot out.

Modelled on the sans-I/O protocol libraries: nothing here owns a thread, a clock, a file, a port or the simulated
robot; `console.loop` (the runner) does all of that and calls `LoopCore.step` once per period. Modules:
`seqnum` (16-bit serial-number arithmetic), `codec` (the Codec protocol both wire codecs implement), `link` (the link
monitor), `safety` (every safety state and transition in one table), `step` (the loop core itself).
"""
