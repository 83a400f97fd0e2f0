"""``python -m shellmodes.cli``: the same as the ``shellmodes`` command."""

import sys

from . import main

sys.exit(main())
