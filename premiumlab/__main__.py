"""`python -m premiumlab` runs the command line."""
from premiumlab.cli import app

app(prog_name="premiumlab")
