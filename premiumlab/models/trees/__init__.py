"""LightGBM text models read as trees: the monotonicity certificate and the interaction statistic."""
