"""``python -m tracktrue``: the same command line as the ``tracktrue`` entry point."""

import sys

from tracktrue.cli import main

sys.exit(main())
