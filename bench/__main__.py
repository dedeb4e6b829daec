"""`python -m bench` runs the `gainbench` command line."""

import sys

from bench.cli import main

sys.exit(main())
