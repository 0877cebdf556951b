"""``python -m analysis.cli`` runs ``harken``."""

import sys

from . import main

sys.exit(main())
