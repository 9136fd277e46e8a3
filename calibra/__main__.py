"""``python -m calibra`` runs the command line (the same as the ``calibra`` command)."""

import sys

from calibra.cli import main

if __name__ == "__main__":
    sys.exit(main())
