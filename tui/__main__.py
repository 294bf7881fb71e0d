"""`python -m tui` runs the `prunetrail` command (viewer included)."""

import sys

from tui.cli import main

sys.exit(main())
