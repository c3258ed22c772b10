"""The engine's version, in a module of its own so that no stage has to import the package root."""

__version__ = "0.9.0"


def engine_name() -> str:
    """The engine as every record and ledger batch names it."""
    return f"sumpwise {__version__}"
