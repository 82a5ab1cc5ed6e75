"""``python -m probe``: the same as the ``probe`` command."""

import sys

from .cli import main

if __name__ == "__main__":
    sys.exit(main())
