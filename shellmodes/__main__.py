"""``python -m shellmodes``: the same as the ``shellmodes`` command."""

import sys

from shellmodes.cli import main

sys.exit(main())
