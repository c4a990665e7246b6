"""``python -m harness`` runs the stridewise command line."""

import sys

from harness.cli import main

if __name__ == "__main__":  # spawned worker processes import this module without running it
    sys.exit(main())
