"""`python -m qamsmith ...`: the same as the `qamsmith` command."""

import sys

from .cli import main

sys.exit(main())
