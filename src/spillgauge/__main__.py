"""Run the command line as ``python -m spillgauge``."""

import sys

from spillgauge.cli import main

sys.exit(main())
