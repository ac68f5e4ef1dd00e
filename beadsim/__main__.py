"""``python -m beadsim``: the same as the ``beadsim`` command."""

import sys

from .cli import main

sys.exit(main())
