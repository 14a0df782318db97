"""``python -m app [FILE]``."""

import sys

from .main import main

sys.exit(main())
