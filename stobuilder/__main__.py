"""``python -m stobuilder``: the command line (``stobuilder.cli``)."""

import sys

from stobuilder.cli import main

sys.exit(main())
