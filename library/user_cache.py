"""The folder where olibra keeps files it can always rebuild (index and stamp caches, benchmark data).

``OLIBRA_CACHE`` names it; otherwise the platform's per-user cache folder (``~/.cache/olibra`` on Linux).
"""

from __future__ import annotations

import os
from pathlib import Path


def folder() -> Path:
    """The cache folder (not created here)."""
    chosen = os.environ.get("OLIBRA_CACHE")
    if chosen:
        return Path(chosen)
    import platformdirs

    return Path(platformdirs.user_cache_dir("olibra", appauthor=False))
