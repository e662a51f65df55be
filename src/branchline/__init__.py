"""branchline: follow equilibria of ODE models through a parameter, and locate,
classify and report where their stability changes."""

__version__ = "0.1.0"
