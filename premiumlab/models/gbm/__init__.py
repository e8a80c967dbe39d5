"""LightGBM boosted models: features, policy-grouped cross-validation, final fits, model files."""
