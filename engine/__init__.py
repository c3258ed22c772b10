"""sumpwise: grade in-service lubricating oil samples against a site's YAML limits."""

__version__ = "0.1.0"
