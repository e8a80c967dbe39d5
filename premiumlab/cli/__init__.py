"""The `premiumlab` command line: the typer app and every text formatter."""

from premiumlab.cli.app import app

__all__ = ["app"]
