"""Messages for a column name that is not in the data file, with a did-you-mean suggestion.

The suggestion is the file's column that differs only in letter case, else the closest
name by difflib's ratio (Ratcliff and Obershelp, 1988) above 0.6.
"""

from __future__ import annotations

import difflib
from collections.abc import Sequence

SHOWN_COLUMNS = 12


def closest_column(name: str, columns: Sequence[str]) -> str | None:
    """The column the user most likely meant, or None when nothing is close."""
    by_case = [c for c in columns if c.lower() == name.lower()]
    if by_case:
        return by_case[0]
    close = difflib.get_close_matches(name, list(columns), n=1, cutoff=0.6)
    return close[0] if close else None


def unknown_column_message(name: str, columns: Sequence[str], file_name: str) -> str:
    """E.g. "no column 'distnce_km' in tutoring.csv; did you mean 'distance_km'?"."""
    guess = closest_column(name, columns)
    if guess is not None:
        return f"no column '{name}' in {file_name}; did you mean '{guess}'?"
    shown = ", ".join(f"'{c}'" for c in columns[:SHOWN_COLUMNS])
    more = len(columns) - SHOWN_COLUMNS
    if more > 0:
        shown += f" and {more} more"
    return (
        f"no column '{name}' in {file_name}; check the spelling against the file's columns: {shown}"
    )
