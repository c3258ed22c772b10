"""`python -m sumpwise` runs the sumpwise command."""

from sumpwise.cli.main import entry

entry()
