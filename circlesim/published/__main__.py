"""``python -m circlesim.published [docs/validation.md]``: regenerate the validation tables."""

import sys

from circlesim.published.kinetics import main

sys.exit(main())
