"""diffdeck console: everything with I/O (profiles, links, the control loop, the simulated robot, the UI)."""

__version__ = "0.1.0"
