"""`python -m premiumlab` runs the command line."""

from premiumlab.cli.app import app

app(prog_name="premiumlab")
