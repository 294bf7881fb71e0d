"""`python -m tracer.cli` runs the `prunetrail` command."""

import sys

from tracer.cli import main

sys.exit(main())
