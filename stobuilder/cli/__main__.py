"""``python -m stobuilder.cli``: the command line."""

import sys

from stobuilder.cli import main

sys.exit(main())
