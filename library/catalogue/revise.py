"""Developer helper: autogenerate an Alembic revision against a scratch SQLite catalogue."""

import sys
import tempfile
from pathlib import Path

from alembic import command

from library.catalogue.database import alembic_config, make_engine, upgrade


def main(message: str) -> None:
    with tempfile.TemporaryDirectory() as folder:
        engine = make_engine(f"sqlite:///{Path(folder) / 'scratch.sqlite'}")
        upgrade(engine)
        command.revision(alembic_config(engine), message=message, autogenerate=True)
        engine.dispose()


if __name__ == "__main__":
    main(" ".join(sys.argv[1:]) or "schema change")
