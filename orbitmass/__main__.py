"""``python -m orbitmass``: the same as the ``orbitmass`` command."""

import sys

from orbitmass.cli import main

sys.exit(main())
