"""``python -m fieldtool``: the same entry point as the ``fieldtool`` command."""

import sys

from fieldtool.cli import main

sys.exit(main())
