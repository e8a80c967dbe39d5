"""Measuring models: deviance, Gini, lift, double lift, A/E, bootstrap intervals, and their figures."""
