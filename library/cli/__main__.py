import sys

from library.cli import main

sys.exit(main())
