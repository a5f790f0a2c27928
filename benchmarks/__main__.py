"""``python -m benchmarks``: run every benchmark and print one table (see benchmarks/run.py)."""

import sys

from benchmarks.run import main

sys.exit(main())
