"""``python -m xlbridge.cli``: the ``xlbridge`` command."""

import sys

from xlbridge.cli import main

sys.exit(main())
