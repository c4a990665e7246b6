"""``python -m harness`` runs the stridewise command line."""

import sys

from harness.cli import main

sys.exit(main())
