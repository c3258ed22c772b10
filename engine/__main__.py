"""`python -m engine` runs the sumpwise command."""

from .cli import entry

entry()
