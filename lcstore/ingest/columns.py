"""From a raw table to typed, checked columns: column roles, numbers, flags, per-row problems.

Pure pandas/numpy, no Django: the upload service hands in the raw table and
the role mapping, and gets back arrays plus every problem found, each naming
the row, the column and what is wrong.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from lcstore.ingest.readers import FileProblem

__all__ = [
    "ROLES",
    "ProblemList",
    "ColumnsMappingError",
    "boolean_column",
    "columns_mapping_parse",
    "numeric_column",
    "resolve_columns",
    "text_column",
]

ROLES = ("time", "value", "error", "upper_limit", "band", "source", "time_error")

# Spellings accepted for an upper-limit flag column (case-insensitive).
_TRUE = {"1", "true", "t", "yes", "y", "<", "ul", "limit", "upper", "upper_limit"}
_FALSE = {"0", "false", "f", "no", "n", "", "det", "detection", "nan", "none"}


@dataclass
class ProblemList:
    """Collects problems; keeps the first ``limit`` and counts the rest."""

    limit: int = 1000
    items: list[FileProblem] = field(default_factory=list)
    total: int = 0

    def add(self, row: int | None, column: str | None, message: str) -> None:
        self.total += 1
        if len(self.items) < self.limit:
            self.items.append(FileProblem(row=row, column=column, message=message))

    def add_rows(
        self, mask: np.ndarray, row_numbers: np.ndarray, column: str, message: str
    ) -> None:
        """One problem per row where ``mask`` is true (only the first ones are built)."""
        bad = np.flatnonzero(mask)
        self.total += len(bad)
        room = self.limit - len(self.items)
        for i in bad[: max(room, 0)]:
            self.items.append(FileProblem(row=int(row_numbers[i]), column=column, message=message))

    def __bool__(self) -> bool:
        return self.total > 0


class ColumnsMappingError(ValueError):
    """The ``columns`` text of an upload is not a JSON object of one column name per role."""


def _pairs_once(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    """``object_pairs_hook`` that refuses a name given twice (JSON keeps only the last)."""
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise ColumnsMappingError(
                f"role {key!r} is given two columns ({out[key]!r} and {value!r}); "
                "name one column per role"
            )
        out[key] = value
    return out


def columns_mapping_parse(text: str) -> dict[str, str] | None:
    """The role -> column mapping of an upload's ``columns`` JSON text (None when blank).

    Duplicate names are refused: RFC 8259 §4 leaves their meaning undefined and
    ``json.loads`` would silently keep the last one.
    """
    if not text or not text.strip():
        return None
    try:
        mapping = json.loads(text, object_pairs_hook=_pairs_once)
    except json.JSONDecodeError as exc:
        raise ColumnsMappingError(f"columns is not valid JSON: {exc.msg}") from None
    except RecursionError:
        raise ColumnsMappingError("columns is not valid JSON: nested too deeply") from None
    if not isinstance(mapping, dict) or not all(
        isinstance(k, str) and isinstance(v, str) for k, v in mapping.items()
    ):
        raise ColumnsMappingError("columns must be a JSON object of role: column name")
    return mapping


def resolve_columns(
    names: list[str],
    mapping: Mapping[str, Any] | None,
    *,
    required: tuple[str, ...],
    problems: ProblemList,
) -> dict[str, str]:
    """Map roles to column names: the explicit mapping first, else a column named as the role.

    Matching of default names ignores case. Unknown roles and unknown columns in the
    mapping, missing required roles, and a column that would fill two roles (named
    twice, or named for one role and taken by its name for another) are reported.
    """
    lower = {n.lower(): n for n in names}
    result: dict[str, str] = {}
    mapping = dict(mapping or {})
    for role, col in mapping.items():
        if role not in ROLES:
            problems.add(None, None, f"unknown column role {role!r}; roles are {', '.join(ROLES)}")
            continue
        if not isinstance(col, str):
            problems.add(None, None, f"column mapping for {role!r} must be a column name")
            continue
        if col in names:
            result[role] = col
        elif col.lower() in lower:
            result[role] = lower[col.lower()]
        else:
            problems.add(
                None,
                col,
                f"column {col!r} (mapped to {role}) is not in the file; "
                f"the file has: {', '.join(names[:50])}",
            )
    for role in ROLES:
        if role not in result and role not in mapping and role in lower:
            result[role] = lower[role]
    roles_of: dict[str, list[str]] = {}
    for role, col in result.items():
        roles_of.setdefault(col, []).append(role)
    for col, roles in roles_of.items():
        if len(roles) > 1:
            named = sorted(roles)
            count = {2: "two", 3: "three"}.get(len(named), str(len(named)))
            problems.add(
                None,
                col,
                f"column {col!r} is given {count} roles "
                f"({', '.join(named[:-1])} and {named[-1]}); "
                "a column can fill one role only: map each role to its own column",
            )
    for role in required:
        if role not in result and role not in mapping:
            problems.add(
                None, role, f"no {role} column: name one in 'columns' or call a column {role!r}"
            )
    return result


def numeric_column(
    series: pd.Series,
    row_numbers: np.ndarray,
    column: str,
    problems: ProblemList,
    *,
    allow_missing: bool,
    what: str,
) -> np.ndarray:
    """Float array of a column; text that is not a number is a problem, so is inf.

    Empty cells (and the text ``nan``) are NaN: allowed only where ``allow_missing``.
    """
    if pd.api.types.is_bool_dtype(series.dtype):
        problems.add(None, column, f"{what} column {column!r} holds true/false, not numbers")
        return np.full(len(series), np.nan)
    if pd.api.types.is_numeric_dtype(series.dtype):
        arr = series.to_numpy(dtype=float, na_value=np.nan)
        blank = np.isnan(arr)
    else:
        text = series.astype("string").str.strip().fillna("")
        arr = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        blank = (text == "").to_numpy() | (text.str.lower() == "nan").to_numpy()
        problems.add_rows(np.isnan(arr) & ~blank, row_numbers, column, f"{what} is not a number")
    if not allow_missing:
        problems.add_rows(blank, row_numbers, column, f"{what} is missing")
    problems.add_rows(np.isinf(arr), row_numbers, column, f"{what} is infinite")
    return arr


def boolean_column(
    series: pd.Series, row_numbers: np.ndarray, column: str, problems: ProblemList
) -> np.ndarray:
    """An upper-limit flag: booleans, 0/1, or words such as true/false, yes/no, '<'."""
    if pd.api.types.is_bool_dtype(series.dtype):
        return series.to_numpy(dtype=bool)
    if pd.api.types.is_numeric_dtype(series.dtype):
        arr = series.to_numpy(dtype=float, na_value=np.nan)
        bad = ~np.isin(arr, [0.0, 1.0]) & ~np.isnan(arr)
        problems.add_rows(bad, row_numbers, column, "upper-limit flag must be 0 or 1")
        return arr == 1.0
    text = series.astype("string").str.strip().str.lower().fillna("")
    is_true = text.isin(list(_TRUE)).to_numpy()
    is_false = text.isin(list(_FALSE)).to_numpy()
    problems.add_rows(
        ~is_true & ~is_false,
        row_numbers,
        column,
        "upper-limit flag must be true/false, yes/no, 1/0 or '<'",
    )
    return is_true


def text_column(series: pd.Series) -> np.ndarray:
    """Stripped text of a column (object array); empty cells become ''."""
    return series.astype("string").str.strip().fillna("").to_numpy(dtype=object)
