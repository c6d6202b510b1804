"""pulsesort's CSV dialect for feature and results files, written fast.

Header row; comma separated; ``\\n`` line ends; NaN as an empty field; floats
with up to 10 significant digits (``format(x, ".10g")``); booleans ``true`` /
``false``; times ISO-8601 UTC with nine fractional digits and ``Z``; text
quoted (RFC 4180) only when it holds a comma, a quote or a line break.

Formatting is column by column with Python's float formatter, about three times
faster than :meth:`pandas.DataFrame.to_csv` with a ``float_format``; on a
million-pulse season that is the difference between seconds and a minute.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["csv_text", "csv_rows", "csv_header", "format_for_csv"]


def _quote(text: str) -> str:
    if "," in text or '"' in text or "\n" in text or "\r" in text:
        return '"' + text.replace('"', '""') + '"'
    return text


def _times(s: pd.Series) -> list[str]:
    if s.dtype.unit == "ns":
        # NumPy's ISO text of the wall-clock times: the same characters as strftime and
        # the nanoseconds below, ~7x faster (a nanosecond datetime64 spans 1677-2262, so
        # the year always has four digits)
        wall = s.dt.tz_localize(None).to_numpy(dtype="datetime64[ns]")
        text = np.char.add(np.datetime_as_string(wall, unit="ns"), "Z").tolist()
        for i in np.flatnonzero(np.isnat(wall)).tolist():
            text[i] = ""
        return text
    ns = (s.astype("int64") % 1_000_000_000).astype(str).str.zfill(9)
    text = s.dt.strftime("%Y-%m-%dT%H:%M:%S") + "." + ns + "Z"
    return text.where(s.notna(), "").tolist()


def _column(s: pd.Series) -> list[str]:
    if s.dtype == bool:
        return np.where(s.to_numpy(), "true", "false").tolist()
    if isinstance(s.dtype, pd.DatetimeTZDtype):
        return _times(s)
    if s.dtype.kind in "fiu":
        vals = s.to_numpy(dtype=np.float64).tolist() if s.dtype.kind == "f" else None
        if vals is None:
            return [str(v) for v in s.tolist()]
        return ["" if v != v else format(v, ".10g") for v in vals]
    return ["" if (v is None or (isinstance(v, float) and v != v)) else _quote(str(v))
            for v in s.tolist()]


def format_for_csv(df: pd.DataFrame) -> pd.DataFrame:
    """The same table with every cell as its CSV text (booleans, times, floats)."""
    return pd.DataFrame({c: _column(df[c]) for c in df.columns}, index=df.index)


def csv_rows(df: pd.DataFrame) -> list[str]:
    """Each row of ``df`` as one CSV record in pulsesort's dialect (no line end).

    A record may hold a line break inside a quoted text field, so records are kept as
    a list rather than split from a text.
    """
    cols = [_column(df[c]) for c in df.columns]
    return [",".join(row) for row in zip(*cols)]


def csv_header(columns) -> str:
    """The header record of the given column names."""
    return ",".join(_quote(str(c)) for c in columns)


def csv_text(df: pd.DataFrame, header: bool = True) -> str:
    """``df`` as CSV text in pulsesort's dialect (no index)."""
    lines = [csv_header(df.columns)] if header else []
    lines.extend(csv_rows(df))
    return "\n".join(lines) + ("\n" if lines else "")
