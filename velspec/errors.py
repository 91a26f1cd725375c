"""Exceptions that the command line turns into one ``velspec: error:`` line."""


class VelspecError(Exception):
    """A user error: bad input file, bad option, impossible parameter. Message says what to do."""


class InputError(VelspecError):
    """The input file cannot be used as it is."""


class ParameterError(VelspecError):
    """A parameter is out of its range or inconsistent with another."""
