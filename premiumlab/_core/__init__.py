"""The private core every layer may use: errors, JSON, atomic outputs, progress, where tasks run, cautions."""
