"""From a run to a rating table: effect curves, banding, the banded refit, rate level, credibility."""
