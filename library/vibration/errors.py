"""Errors raised by the vibration engine; all are ValueError subclasses."""

from __future__ import annotations

from library.errors import OlibraError


class VibrationInputError(OlibraError, ValueError):
    """The input (structure, array or option) cannot be used; the message says why and what to do."""


class MissingParametersError(VibrationInputError):
    """The chosen force field has no parameters for some atoms of the material."""


class NotAMinimumError(VibrationInputError):
    """The geometry could not be brought to a true minimum (imaginary modes or large gradient remain)."""
