"""``python -m popdens ...``: the ``popdens`` command run by this interpreter on this copy of the package."""

import sys

from .cli import main

sys.exit(main())
