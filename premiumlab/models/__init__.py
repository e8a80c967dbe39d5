"""The models: GLM baselines (`glm/`), LightGBM boosted models (`gbm/`), and LightGBM text trees (`trees/`)."""
