"""GLM baselines: the fits, the cells and rows engines, and the Tweedie power profile."""
