"""The run directory and the steps of `fit` that write it."""
