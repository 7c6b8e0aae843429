"""``python -m stobuilder``: the command line."""

import sys

from stobuilder.cli import main

sys.exit(main())
