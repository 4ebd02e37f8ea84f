"""``python -m sitrep.cli``: the same as the ``sitrep`` command."""

import sys

from sitrep.cli import main

sys.exit(main())
