"""tradewise: find, judge and communicate the trade-offs between competing design goals."""

from tradewise.errors import CaseError, DataError, ModelError, StoreError, TradewiseError

__version__ = "0.1.0"

_LAZY = {
    "Case": "case",
    "Constraint": "case",
    "Objective": "case",
    "SearchSettings": "case",
    "Variable": "case",
    "load_case": "case",
    "Front": "front",
    "hypervolume": "front",
    "nondominated": "front",
    "read_front": "front",
    "RunInfo": "runinfo",
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
    # Everything but the errors is imported on first use (the search pulls in pymoo, the front pandas),
    # so that `tradewise --help` and `tradewise cases` start quickly.
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
