"""``python -m shellmodes``: the same as the ``shellmodes`` command."""

import sys

from .cli import main

sys.exit(main())
