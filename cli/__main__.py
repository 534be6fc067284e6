"""``python -m lidmelt.cli``: the same as the ``lidmelt`` command."""

import sys

from . import main

sys.exit(main())
