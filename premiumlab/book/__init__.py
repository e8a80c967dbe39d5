"""The book and its spec: reading CSV/Parquet, row checks, the whole-book scan, bands, split, `validate`."""
