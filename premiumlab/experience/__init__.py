"""Claim experience before modelling: development, trend, large-loss cap, catastrophe load; `tails`."""
