"""``python -m liqpanel``: the same command line as ``liqpanel``."""

import sys

from liqpanel.cli import main

sys.exit(main())
