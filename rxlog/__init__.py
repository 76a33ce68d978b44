"""rxlog: unattended logger and burst detector for decametric Jupiter and solar radio monitoring."""

__version__ = "0.1.0"
