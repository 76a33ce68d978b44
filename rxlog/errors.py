"""Failures a user can act on.

Library code raises ``RxlogError`` (or a subclass) with one or two lines that name the
file, key or line and say what was expected. The command line prints the message and
exits with status 2; internal bugs stay ordinary exceptions.
"""


class RxlogError(Exception):
    """A known failure caused by input, configuration or the environment."""
