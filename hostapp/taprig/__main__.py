"""Allow ``python -m taprig``."""

import sys

from taprig.cli import main

sys.exit(main())
