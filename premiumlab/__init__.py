"""premiumlab: GLM baselines, boosted trees and banded rating tables for insurance pricing."""
