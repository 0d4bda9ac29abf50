"""``python -m netprobe``: the same as the ``netprobe`` command."""

import sys

from netprobe.cli import main

sys.exit(main())
