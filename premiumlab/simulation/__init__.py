"""Invented books with known truth, from scenario TOML files (`simulate`)."""
