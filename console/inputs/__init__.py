"""Request sources other than the terminal: input devices through the Linux input subsystem."""
