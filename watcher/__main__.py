"""`python -m watcher` runs the same command line as `ionwarden`."""

import sys

from watcher.cli.main import main

sys.exit(main())
