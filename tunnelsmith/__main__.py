"""``python -m tunnelsmith``: the command line."""

import sys

from tunnelsmith.optimize.cli import main

sys.exit(main())
