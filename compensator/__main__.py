"""Allow ``python -m compensator``."""

import sys

from compensator.cli import main

sys.exit(main())
