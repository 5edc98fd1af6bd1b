"""The one exception tree of tradewise; every user mistake is a TradewiseError."""

from __future__ import annotations

__all__ = ["TradewiseError", "CaseError", "ModelError", "DataError", "StoreError"]


class TradewiseError(Exception):
    """Root of every error that tradewise raises on purpose.

    The message is one sentence naming the item, what was received, what is
    allowed and where (file, table, key or row). The command line prints it as
    one ``Error: ...`` line and exits with status 2.
    """

    exit_code = 2


class CaseError(TradewiseError, ValueError):
    """A case file or case folder is wrong: syntax, schema or a missing model."""


class ModelError(TradewiseError, RuntimeError):
    """The designer's model cannot be used at all (not one failed design: those are recorded)."""


class DataError(TradewiseError, ValueError):
    """A table of designs or a front file is unusable: missing columns, bad values, bad metadata."""


class StoreError(TradewiseError, OSError):
    """The SQLite archive is missing, unreadable, or belongs to another case."""
