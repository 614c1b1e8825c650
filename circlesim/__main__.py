"""``python -m circlesim`` runs the command line."""

import sys

from circlesim.cli import main

sys.exit(main())
