"""Small reusable validators shared by the catalog reader and the CLI.

Every message names the place (file, row, key) and what was expected, so a user
can fix the input without reading code.
"""

from __future__ import annotations

import math
import os
import stat
from collections.abc import Iterable
from dataclasses import dataclass
from numbers import Real

__all__ = [
    "InputError",
    "CatalogError",
    "Plausible",
    "Problems",
    "check_option",
    "check_positive",
    "describe_path_kind",
    "is_real_number",
]


class InputError(ValueError):
    """An input (catalog, station description, labels file, model folder, option)
    breaks its contract: the one error type raised at pulsesort's boundaries.

    The command line maps it to exit code 2; any other exception is a bug (exit 1).

    Parameters
    ----------
    problems : str or list of str
        Every problem found, each naming the file, row or key and what was
        expected. ``str(error)`` joins them one per line.

    Examples
    --------
    >>> err = InputError(["events.csv:3: 'time_utc' must be ISO-8601 UTC, got 'noon'",
    ...                   "catalog.json: 'field.sample_rate_hz' must be > 0, got -1"])
    >>> isinstance(err, ValueError), len(err.problems)
    (True, 2)
    >>> print(err)
    events.csv:3: 'time_utc' must be ISO-8601 UTC, got 'noon'
    catalog.json: 'field.sample_rate_hz' must be > 0, got -1
    """

    def __init__(self, problems: str | Iterable[str]):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        if not self.problems:
            self.problems = ["unspecified input problem"]
        super().__init__("\n".join(self.problems))


#: The name used by the catalog reader; the same class as :class:`InputError`.
CatalogError = InputError


class Problems:
    """Collects problems so that a validator can report all of them at once."""

    def __init__(self, max_per_key: int = 20):
        self.items: list[str] = []
        self.max_per_key = max_per_key
        self._counts: dict[str, int] = {}

    def add(self, message: str, key: str | None = None) -> None:
        """Record a problem; after ``max_per_key`` with the same key, only count."""
        if key is not None:
            n = self._counts.get(key, 0) + 1
            self._counts[key] = n
            if n > self.max_per_key:
                return
        self.items.append(message)

    def summarise(self) -> None:
        """Add a line for every key whose problems were cut short."""
        for key, n in self._counts.items():
            if n > self.max_per_key:
                self.items.append(f"{key}: ... and {n - self.max_per_key} more like this")
        self._counts = {k: min(v, self.max_per_key) for k, v in self._counts.items()}

    def raise_if_any(self) -> None:
        """Raise :class:`CatalogError` listing every problem, if any."""
        self.summarise()
        if self.items:
            raise CatalogError(self.items)

    def __bool__(self) -> bool:
        return bool(self.items)

    def __len__(self) -> int:
        return len(self.items)


def is_real_number(value) -> bool:
    """True for an int or float that is not a bool and is finite as a float.

    An integer too large for a float (more than about 309 digits) is not.
    """
    if not isinstance(value, Real) or isinstance(value, bool):
        return False
    try:
        return math.isfinite(float(value))
    except OverflowError:
        return False


@dataclass(frozen=True)
class Plausible:
    """A generous physical range for a number read from a user's file.

    The ranges are wide on purpose: they refuse what no instrument could
    record (a sample rate of 1e308 Hz, a decay time of 1e-308 s), which would
    otherwise overflow or empty an array deep in the feature code, and let
    every real instrument through. ``why`` says what the bounds rest on.

    Attributes
    ----------
    low, high : float
        Inclusive bounds, in ``unit``.
    unit : str
    why : str
    """

    low: float
    high: float
    unit: str
    why: str

    def contains(self, value: float) -> bool:
        return self.low <= value <= self.high

    def describe(self) -> str:
        """``"1e+03 to 1e+11 Hz"``: the bounds for a message."""
        unit = f" {self.unit}" if self.unit else ""
        return f"{self.low:g} to {self.high:g}{unit}"


def describe_path_kind(path) -> str | None:
    """What a path is when it is not a regular file: None for a regular file.

    Follows symbolic links, so a link to a device is reported as the device.
    Returns ``"missing"``, ``"a folder"``, ``"a FIFO (named pipe)"``,
    ``"a character device"``, ``"a block device"``, ``"a socket"``,
    ``"a broken symbolic link"`` or ``"unreadable (<reason>)"``.
    """
    p = os.fspath(path)
    try:
        st = os.stat(p)
    except FileNotFoundError:
        return "a broken symbolic link" if os.path.islink(p) else "missing"
    except (OSError, ValueError) as exc:  # ValueError: a NUL byte in the name
        return f"unreadable ({getattr(exc, 'strerror', None) or exc})"
    mode = st.st_mode
    if stat.S_ISREG(mode):
        return None
    for test, what in ((stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a FIFO (named pipe)"),
                       (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
                       (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return what
    return "not a regular file"


def check_positive(value, where: str) -> float:
    """Return ``float(value)`` or raise :class:`InputError` unless it is a finite number > 0.

    Parameters
    ----------
    value : object
        The value to check.
    where : str
        Where it came from, e.g. ``"catalog.json: field.sample_rate_hz"``.
    """
    if not is_real_number(value) or float(value) <= 0:
        raise InputError(f"{where} must be a finite number > 0, got {value!r}")
    return float(value)


def check_option(value, allowed: Iterable, where: str):
    """Return ``value`` or raise :class:`InputError` listing the allowed values."""
    allowed = list(allowed)
    if value not in allowed:
        choices = ", ".join(repr(a) for a in allowed)
        raise InputError(f"{where} must be one of {choices}, got {value!r}")
    return value
