"""``python -m popdens ...``: the ``popdens`` command run by this interpreter on this copy of the package."""

from .cli import run

run()
