"""Allow ``python -m driftloop``."""

import sys

from driftloop.cli import main

sys.exit(main())
