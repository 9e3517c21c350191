"""``python -m skyscale.cli``: the command line."""

import sys

from skyscale.cli.commands import main

sys.exit(main())
