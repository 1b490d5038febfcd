"""The seed catalogue shipped inside the olibra package: starter materials, odor vocabulary and their docs.

`materials.csv` and `odor_vocabulary.csv` (described in FORMAT.md, the demo
scenario in DEMO.md) are package data: they travel in the built wheel and are
found next to this module, not through the source tree.
"""

from importlib import resources
from pathlib import Path

SEED_DIR = Path(str(resources.files(__name__)))
MATERIALS_FILE = SEED_DIR / "materials.csv"
VOCABULARY_FILE = SEED_DIR / "odor_vocabulary.csv"
