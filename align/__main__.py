"""``python -m align`` runs the ``corealign`` command."""

import sys

from align.cli import main

sys.exit(main())
