"""Allow ``python -m zoning``."""

import sys

from zoning.cli import main

sys.exit(main())
