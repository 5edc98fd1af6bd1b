"""tradewise: find, judge and communicate the trade-offs between competing design goals."""

from tradewise.case import Case, Constraint, Objective, SearchSettings, Variable, load_case
from tradewise.errors import CaseError, DataError, ModelError, StoreError, TradewiseError
from tradewise.front import Front, hypervolume, nondominated, read_front

__version__ = "0.1.0"

__all__ = [
    "Case",
    "Constraint",
    "Objective",
    "SearchSettings",
    "Variable",
    "load_case",
    "Front",
    "read_front",
    "hypervolume",
    "nondominated",
    "TradewiseError",
    "CaseError",
    "ModelError",
    "DataError",
    "StoreError",
]
