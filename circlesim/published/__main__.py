"""``python -m circlesim.published [docs/validation.md]``: regenerate the validation document."""

import sys

from circlesim.published.document import main

sys.exit(main())
