"""Validation of the values that enter the label store (one layer, at the boundary).

Everything here is pure Python: no SQL, no I/O.
"""

from __future__ import annotations

import math
import re
import unicodedata
from datetime import datetime, timezone
from numbers import Real

from features import InputError

#: Where a decision came from. ``resolve`` settles a conflict; ``retract``
#: withdraws the analyst's label (its ``label`` is NULL).
ORIGINS = ("import", "review", "rule", "model-accepted", "resolve", "retract")

#: The classes every new store starts with, with a one-line description each.
STANDARD_CLASSES = (
    ("narrow_bipolar",
     "Narrow bipolar event (compact intracloud discharge): an isolated bipolar "
     "field change some tens of microseconds long with intense VHF radiation "
     "(Smith et al. 1999; Rakov & Uman 2003, ch. 9; from memory)."),
    ("stepped_leader",
     "Stepped leader pulse: one of a train of short unipolar field pulses, "
     "microseconds to tens of microseconds apart, ahead of a return stroke "
     "(Rakov & Uman 2003, ch. 4; from memory)."),
    ("recoil",
     "Recoil leader / K-change pulse: a fast re-illumination of an earlier "
     "channel, VHF sources moving at about 1e6 to 1e7 m/s "
     "(Rakov & Uman 2003, ch. 9; from memory)."),
    ("energetic_in_cloud",
     "Energetic in-cloud pulse: a very large, slow in-cloud field pulse during "
     "upward negative leader development, linked with terrestrial gamma-ray "
     "flashes (Lyu et al. 2015, 2016; from memory)."),
)

CLASS_NAME_RE = re.compile(r"[a-z][a-z0-9_]{0,39}")

# ISO-8601 date, optionally with a time, seconds, fraction and offset.
_ISO_RE = re.compile(
    r"(?P<date>\d{4}-\d{2}-\d{2})"
    r"(?:[T ](?P<hm>\d{2}:\d{2})(?::(?P<s>\d{2})(?:\.(?P<frac>\d{1,9}))?)?"
    r"(?P<tz>Z|[+-]\d{2}:?\d{2})?)?"
)


def utc_now() -> str:
    """The current time as a store timestamp (UTC, microseconds)."""
    return format_time(datetime.now(timezone.utc))


def format_time(dt: datetime) -> str:
    """``YYYY-MM-DDTHH:MM:SS.ffffffZ``: fixed width, so text order is time order."""
    dt = dt.astimezone(timezone.utc)
    return dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def parse_time(value) -> str:
    """Turn an ISO-8601 string or a ``datetime`` into a store timestamp.

    A time without an offset is taken as UTC. Fractions finer than a
    microsecond are truncated.

    Raises
    ------
    InputError
        If ``value`` is not an ISO-8601 date/time (the message says what was
        expected; the caller adds the place).
    """
    if isinstance(value, datetime):
        dt = value if value.tzinfo is not None else value.replace(tzinfo=timezone.utc)
        return format_time(dt)
    if not isinstance(value, str):
        raise InputError(f"expected an ISO-8601 time such as 2031-07-14T21:03:55Z, "
                         f"got {value!r}")
    m = _ISO_RE.fullmatch(value.strip())
    if m is None:
        raise InputError(f"expected an ISO-8601 time such as 2031-07-14T21:03:55Z, "
                         f"got {value!r}")
    text = m["date"]
    if m["hm"]:
        text += "T" + m["hm"] + ":" + (m["s"] or "00")
        if m["frac"]:
            text += "." + (m["frac"] + "000000")[:6]
        tz = m["tz"] or "+00:00"
        if tz == "Z":
            tz = "+00:00"
        elif ":" not in tz:
            tz = tz[:3] + ":" + tz[3:]
        text += tz
    else:
        text += "T00:00:00+00:00"
    try:
        dt = datetime.fromisoformat(text)
    except ValueError as exc:  # e.g. month 13, hour 25
        raise InputError(f"not a valid time: {value!r} ({exc})") from None
    return format_time(dt)


def check_text(value, what: str, *, allow_newlines: bool) -> str:
    """Return ``value`` unchanged if it is acceptable free text, else raise ``InputError``.

    Any printable text is accepted verbatim, including quotes and SQL
    fragments (they are bound as parameters, never executed). Refused: a
    non-string, NUL and other control characters (newlines and tabs are allowed
    only where ``allow_newlines``), and text that is not valid Unicode.
    """
    if not isinstance(value, str):
        raise InputError(f"{what} must be text, got {type(value).__name__} {value!r}")
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        raise InputError(f"{what} is not valid Unicode text: {value[:40]!r}") from None
    allowed = "\n\r\t" if allow_newlines else ""
    for ch in value:
        if ch not in allowed and unicodedata.category(ch) == "Cc":
            raise InputError(f"{what} must not contain control characters such as "
                             f"{ch!r}, got {_short(value)}")
    return value


def check_name(value, what: str) -> str:
    """An analyst name or id: non-empty, one line, no surrounding spaces."""
    check_text(value, what, allow_newlines=False)
    if not value.strip():
        raise InputError(f"{what} must not be empty")
    if value != value.strip():
        raise InputError(f"{what} must not start or end with spaces, got {_short(value)}")
    return value


def check_class_name(value, what: str = "class name") -> str:
    """A class name: lower-case letters, digits and underscores, 1-40 characters."""
    if not isinstance(value, str) or CLASS_NAME_RE.fullmatch(value) is None:
        raise InputError(f"{what} must be 1-40 characters of a-z, 0-9 and '_' starting "
                         f"with a letter (e.g. 'other'), got {value!r}")
    return value


def check_confidence(value, what: str = "confidence") -> float | None:
    """None, or a probability in [0, 1]."""
    if value is None:
        return None
    if isinstance(value, str):
        try:
            value = float(value)
        except ValueError:
            raise InputError(f"{what} must be a number in [0, 1], got {value!r}") from None
    if (not isinstance(value, Real) or isinstance(value, bool)
            or not math.isfinite(float(value)) or not 0.0 <= float(value) <= 1.0):
        raise InputError(f"{what} must be a number in [0, 1], got {value!r}")
    return float(value)


def _short(text: str, n: int = 60) -> str:
    return repr(text if len(text) <= n else text[:n] + "...")
