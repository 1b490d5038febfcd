"""Errors a person sees: each says what was wrong with their input and what to do."""


class OlibraError(Exception):
    """Base class for problems caused by the user's input or environment.

    The command line and the web interface show the message as it is, without a
    traceback; any other exception is a bug in olibra.
    """
