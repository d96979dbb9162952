"""``python -m liqpanel.cli``: the same command line as ``liqpanel``."""

import sys

from liqpanel.cli import main

sys.exit(main())
