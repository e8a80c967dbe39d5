"""rating_tables: the filed rating-table format, rater, audit and impact (numpy, pandas, pyarrow only)."""
