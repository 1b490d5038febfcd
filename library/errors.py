"""Errors a person sees: each says what was wrong with their input and what to do.

Core messages describe the problem and the remedy in words. Where the remedy is an action a
front end offers (a command, a page), the error names it with a :class:`Remedy`, and each front
end adds its own hint: the command line names the command, the web names the page. The core
never tells a web user to type a command, nor a command-line user to press a button.
"""

from __future__ import annotations

from enum import Enum


class Remedy(str, Enum):
    """Actions a front end can point to when an error names them."""

    COMPUTE_RECORDS = "compute-records"  # compute the missing or stale shape and vibration records
    INIT_CATALOGUE = "init-catalogue"  # create or upgrade the catalogue schema
    FIND_MATERIAL = "find-material"  # look the material up in the catalogue list
    ADD_MATERIAL = "add-material"  # add a structure to the catalogue first
    VOCABULARY = "vocabulary"  # see or extend the odor vocabulary
    IMPORT_OBSERVATIONS = "import-observations"  # import an observation data set
    LIST_USERS = "list-users"  # see the web accounts


class OlibraError(Exception):
    """Base class for problems caused by the user's input or environment.

    The command line and the web interface show the message as it is, without a
    traceback (plus their own hint for `remedy`); any other exception is a bug in olibra.
    """

    remedy: Remedy | None = None

    def __init__(self, *args, remedy: Remedy | None = None):
        super().__init__(*args)
        if remedy is not None:
            self.remedy = remedy
