"""The simulated robot: physics (plant), firmware emulation, serving on a pty or TCP."""
