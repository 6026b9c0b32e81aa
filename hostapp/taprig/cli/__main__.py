"""Allow ``python -m taprig.cli``."""

import sys

from taprig.cli import main

sys.exit(main())
