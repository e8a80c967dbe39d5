"""Applying a rating table over `rating_tables`: `rate`, `impact`, and `audit` with `certify`."""
