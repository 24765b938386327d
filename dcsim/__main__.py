"""``python -m dcsim``: the same as the ``dcsim`` command."""

import sys

from dcsim.cli import main

sys.exit(main())
