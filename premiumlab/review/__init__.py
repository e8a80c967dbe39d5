"""The review of a run: `compare` (holdout comparison and figures) and `report` (the HTML report)."""
