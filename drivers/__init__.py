"""Everything that talks to, or pretends to be, hardware: VISA, the VNA, probers,
the watched folder and the simulated bench. Never imports the UI."""
