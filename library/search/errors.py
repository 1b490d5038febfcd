"""The error every search module raises for a question it cannot answer as asked."""

from __future__ import annotations

from library.errors import OlibraError, Remedy


class SearchError(OlibraError, ValueError):
    """A search that cannot be answered as asked."""


def needs_records(label: str) -> SearchError:
    """The error for a material that has no current shape and vibration records yet."""
    return SearchError(f"{label} has no current shape and vibration records yet; compute them first",
                       remedy=Remedy.COMPUTE_RECORDS)
