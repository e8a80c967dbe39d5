"""Applying a rating table: `rate`, `impact` and `audit`, glue over `rating_tables`."""
