"""Version numbers of the program and of the numbers it produces."""

__version__ = "0.1.0"
