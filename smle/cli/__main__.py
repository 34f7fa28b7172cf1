"""``python -m smle.cli``: the command line."""

import sys

from smle.cli.app import main

sys.exit(main())
