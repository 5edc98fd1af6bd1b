"""tradewise: find, judge and communicate the trade-offs between competing design goals."""

from tradewise.case import Case, Constraint, Objective, SearchSettings, Variable, load_case
from tradewise.errors import CaseError, DataError, ModelError, StoreError, TradewiseError
from tradewise.front import Front, hypervolume, nondominated, read_front
from tradewise.runinfo import RunInfo

__version__ = "0.1.0"

_LAZY = {
    "run": "search",
    "resume": "search",
    "RunResult": "search",
    "run_seeds": "repeats",
    "resume_seeds": "repeats",
    "SeedsResult": "repeats",
    "save_run": "runfolder",
    "save_seeds": "runfolder",
}


def __getattr__(name: str):
    # The search pulls in pymoo; it is imported on first use so that `tradewise --help` stays quick.
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(f"tradewise.{_LAZY[name]}"), name)
    raise AttributeError(f"module 'tradewise' has no attribute {name!r}")


__all__ = [
    "Case",
    "Constraint",
    "Objective",
    "SearchSettings",
    "Variable",
    "load_case",
    "run",
    "resume",
    "run_seeds",
    "resume_seeds",
    "save_run",
    "save_seeds",
    "RunResult",
    "SeedsResult",
    "Front",
    "RunInfo",
    "read_front",
    "hypervolume",
    "nondominated",
    "TradewiseError",
    "CaseError",
    "ModelError",
    "DataError",
    "StoreError",
]
