"""Engineer's review of identified criticals: accept, reject or add, each with a reason.

A review file (TOML) records decisions identification must honour::

    # synthetic example
    [[reject]]
    speed_rpm = 6120
    reason = "1X of the neighbouring pump coupled through the foundation"

    [[accept]]
    speed_rpm = 7480
    reason = "phase rise confirmed on the casing accelerometers"

    [[add]]
    speed_rpm = 5400
    reason = "seen on the casing; masked on the shaft probes"
    damping_ratio = 0.08        # optional starting value

Every entry may carry ``tolerance_percent`` (default 3: how near, relative to its speed,
a critical must lie to be the one meant), ``segment`` (0-based; default every segment)
and ``order`` (default 1).  ``reject`` removes the matching critical and lists it among
the rejected with the reason; ``accept`` keeps a candidate even when the modal fit finds it
insignificant; ``add`` makes the fit try a mode at that speed even with no candidate
there.  The reason is kept in the critical's notes and flags (``review_accepted``,
``review_added``).
"""

from __future__ import annotations

import math
import os
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from .errors import DataFormatError

__all__ = ["ReviewEntry", "Review", "read_review", "EMPTY_REVIEW"]

Action = Literal["accept", "reject", "add"]
_KEYS = {"speed_rpm", "reason", "tolerance_percent", "segment", "order", "damping_ratio"}


@dataclass(frozen=True)
class ReviewEntry:
    """One review decision."""

    action: Action
    speed_rpm: float
    reason: str
    tolerance_percent: float = 3.0
    segment: int | None = None
    order: int = 1
    damping_ratio: float | None = None

    def matches(self, speed_rpm: float, *, segment: int, order: int) -> bool:
        """Whether a critical at ``speed_rpm`` in that segment and order is the one meant."""
        if order != self.order or (self.segment is not None and segment != self.segment):
            return False
        return abs(speed_rpm - self.speed_rpm) <= self.tolerance_percent / 100.0 * self.speed_rpm


@dataclass(frozen=True)
class Review:
    """All decisions of a review file."""

    entries: tuple[ReviewEntry, ...] = ()
    path: str | None = None

    def of(self, action: Action) -> tuple[ReviewEntry, ...]:
        return tuple(e for e in self.entries if e.action == action)


EMPTY_REVIEW = Review()


def _entry(action: Action, item: Any, index: int, file: str) -> ReviewEntry:
    where = f"[[{action}]] entry {index + 1}"
    if not isinstance(item, dict):
        raise DataFormatError(f"{where} must be a table", file=file)
    unknown = sorted(set(item) - _KEYS)
    if unknown:
        raise DataFormatError(f"{where}: unknown key(s) {unknown}; valid keys: {sorted(_KEYS)}", file=file)
    speed = item.get("speed_rpm")
    if isinstance(speed, bool) or not isinstance(speed, int | float) or not (math.isfinite(speed) and speed > 0):
        raise DataFormatError(f"{where}: speed_rpm must be a positive number, got {speed!r}", file=file)
    reason = item.get("reason")
    if not isinstance(reason, str) or not reason.strip():
        raise DataFormatError(f"{where}: a reason is required (a sentence saying why)", file=file)
    tol = item.get("tolerance_percent", 3.0)
    if isinstance(tol, bool) or not isinstance(tol, int | float) or not 0 < tol <= 50:
        raise DataFormatError(f"{where}: tolerance_percent must be in (0, 50], got {tol!r}", file=file)
    seg = item.get("segment")
    if seg is not None and (isinstance(seg, bool) or not isinstance(seg, int) or seg < 0):
        raise DataFormatError(f"{where}: segment must be a whole number >= 0, got {seg!r}", file=file)
    order = item.get("order", 1)
    if isinstance(order, bool) or not isinstance(order, int) or order < 1:
        raise DataFormatError(f"{where}: order must be a whole number >= 1, got {order!r}", file=file)
    zeta = item.get("damping_ratio")
    if zeta is not None and (isinstance(zeta, bool) or not isinstance(zeta, int | float) or not 0 < zeta < 0.7):
        raise DataFormatError(f"{where}: damping_ratio must be in (0, 0.7), got {zeta!r}", file=file)
    return ReviewEntry(action, float(speed), reason.strip(), float(tol), seg, int(order),
                       None if zeta is None else float(zeta))


def read_review(path: str | os.PathLike[str]) -> Review:
    """Read a review file (format in the module notes); strict about unknown keys."""
    file = str(path)
    try:
        doc = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise DataFormatError("review file not found; check the path", file=file) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise DataFormatError(f"cannot read review file ({exc})", file=file) from None
    except tomllib.TOMLDecodeError as exc:
        raise DataFormatError(f"not valid TOML: {exc}", file=file) from None
    unknown = sorted(set(doc) - {"accept", "reject", "add"})
    if unknown:
        raise DataFormatError(f"unknown table(s) {unknown}; a review has [[accept]], [[reject]] and [[add]]", file=file)
    entries = []
    for action in ("accept", "reject", "add"):
        items = doc.get(action, [])
        if not isinstance(items, list):
            raise DataFormatError(f"'{action}' must be an array of tables ([[{action}]])", file=file)
        entries.extend(_entry(action, item, i, file) for i, item in enumerate(items))  # type: ignore[arg-type]
    return Review(tuple(entries), file)
