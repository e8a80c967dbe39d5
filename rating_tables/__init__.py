"""rating_tables: the filed rating-table format, rater, audit and impact (numpy, pandas, pyarrow only)."""

from __future__ import annotations

from rating_tables.audit import Flattening, Violation, audit, audit_path, flattened
from rating_tables.errors import TableError
from rating_tables.exhibit import write_exhibit
from rating_tables.impact import Capping, cap_premiums, impact
from rating_tables.io import load, save
from rating_tables.rate import LevelCounts, premium_build_up, pure_premium, rate, solve_base_rate
from rating_tables.ratefile import RatedFile, rate_file
from rating_tables.table import (
    DRAFT_CAUTION,
    MISSING_LABEL,
    Bands,
    CategoricalFactor,
    InteractionFactor,
    Loadings,
    MissingRow,
    NumericFactor,
    RatingTable,
    Rounding,
)

__all__ = [
    "DRAFT_CAUTION",
    "MISSING_LABEL",
    "Bands",
    "Capping",
    "CategoricalFactor",
    "Flattening",
    "InteractionFactor",
    "LevelCounts",
    "Loadings",
    "MissingRow",
    "NumericFactor",
    "RatedFile",
    "RatingTable",
    "Rounding",
    "TableError",
    "Violation",
    "audit",
    "audit_path",
    "cap_premiums",
    "flattened",
    "impact",
    "load",
    "premium_build_up",
    "pure_premium",
    "rate",
    "rate_file",
    "save",
    "solve_base_rate",
    "write_exhibit",
]
