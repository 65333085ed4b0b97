"""``python -m advbound`` runs the command line."""

import sys

from advbound.cli import main

sys.exit(main())
