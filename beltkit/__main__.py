"""Run the ``beltkit`` command as ``python -m beltkit`` (same as the installed script)."""

import sys

from .cli import main

if __name__ == "__main__":
    sys.exit(main())
