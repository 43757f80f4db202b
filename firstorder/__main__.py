"""``python -m firstorder``: the same command line as ``firstorder``."""

import sys

from .cli import main

sys.exit(main())
