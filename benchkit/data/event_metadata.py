"""Per-event metadata files of the split-folder layout, matched to labelled events by overlap.

Two optional files publish what each labelled test event looked like:

``ROOT/interpretation_label/<entity>.txt``
    one line per event (or per part of an event): ``START-END:k1,k2,...``, the KPIs that showed
    the incident, numbered from 1 as the file's columns.
``ROOT/anomaly_type.csv``
    header ``dataset,anomaly_segment,anomaly_type``; one row per event: the entity, its
    ``START-END`` range and a kind (e.g. ``metric``, ``temporal``).

Releases write ``END`` differently: some as the event's last test index (``"inclusive"``), some
as one past it (``"exclusive"``). The loader does not guess: the option ``interpretation_end``
says which (default ``"inclusive"``, benchkit's own event convention); it applies to both files.

Lines are matched to labelled events (maximal runs of label 1) by overlap, never by equal
boundaries: a line belongs to every event its range overlaps, and the KPIs of several lines for
one event are united. A line that overlaps no event, or an event that no line covers, is a
:class:`DataWarning` naming the file; a malformed line is a :class:`DataError` naming file and
line.
"""

from __future__ import annotations

import csv
import re
import warnings
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from benchkit.data.model import Event
from benchkit.data.validate import DataWarning
from benchkit.errors import DataError

INTERPRETATION_FOLDER = "interpretation_label"
KINDS_FILE = "anomaly_type.csv"
KINDS_COLUMNS = ("dataset", "anomaly_segment", "anomaly_type")
END_CONVENTIONS = ("inclusive", "exclusive")

_RANGE = re.compile(r"^\s*(-?\d+)\s*-\s*(-?\d+)\s*$")


@dataclass(frozen=True)
class MetadataLine:
    """One parsed line: an inclusive test range and what it says about the event(s) there."""

    start: int
    end: int
    line: int
    culprits: frozenset[int] | None = None
    kind: str | None = None


def check_end_convention(where: str, value: object) -> str:
    """Reject an unknown ``interpretation_end`` option."""
    if value not in END_CONVENTIONS:
        valid = ", ".join(repr(v) for v in END_CONVENTIONS)
        raise DataError(f"{where}: option interpretation_end must be one of {valid}, got {value!r}")
    return str(value)


def parse_range(text: str, end_convention: str, where: str, n_test: int | None = None):
    """``"START-END"`` to an inclusive 0-based ``(start, end)`` pair.

    Parameters
    ----------
    text : the range as written.
    end_convention : ``"inclusive"`` (END is the last index) or ``"exclusive"`` (one past it).
    where : ``"path: line N"`` for messages.
    n_test : when given, the range must lie inside the test part's ``n_test`` steps.
    """
    match = _RANGE.match(text)
    if match is None:
        raise DataError(f"{where}: malformed range {text.strip()!r} (expected START-END)")
    start, end_written = int(match.group(1)), int(match.group(2))
    end = end_written - 1 if end_convention == "exclusive" else end_written
    if start < 0:
        raise DataError(f"{where}: range {text.strip()!r} starts before index 0")
    if end < start:
        what = "is empty" if end_written == start else "is reversed (START after END)"
        raise DataError(f"{where}: range {text.strip()!r} {what} (END read as {end_convention})")
    if n_test is not None and end >= n_test:
        raise DataError(
            f"{where}: range {text.strip()!r} goes past the test part's {n_test} steps "
            f"(END read as {end_convention})"
        )
    return start, end


def read_interpretation(
    path: Path, n_channels: int, n_test: int, end_convention: str
) -> list[MetadataLine]:
    """Parse ``interpretation_label/<entity>.txt``; blank lines are skipped.

    KPIs become 0-based channel indices; each must lie in ``1..n_channels``.
    """
    out = []
    for number, raw in enumerate(_read_lines(path), start=1):
        if not raw.strip():
            continue
        where = f"{path}: line {number}"
        head, sep, tail = raw.partition(":")
        if not sep:
            raise DataError(
                f"{where}: malformed line {raw.strip()!r} (expected START-END:k1,k2,...)"
            )
        start, end = parse_range(head, end_convention, where, n_test)
        out.append(MetadataLine(start, end, number, culprits=_kpis(tail, n_channels, where)))
    return out


def _kpis(text: str, n_channels: int, where: str) -> frozenset[int]:
    parts = [p.strip() for p in text.split(",")]
    if not any(parts):
        raise DataError(f"{where}: no KPI listed after ':' (expected START-END:k1,k2,...)")
    found = set()
    for part in parts:
        if not part:
            raise DataError(f"{where}: empty KPI in the list {text.strip()!r}")
        if not part.isdigit():
            raise DataError(f"{where}: KPI {part!r} is not a whole number")
        k = int(part)
        if not 1 <= k <= n_channels:
            raise DataError(
                f"{where}: KPI {k} out of range (the entity has {n_channels} KPIs, numbered from 1)"
            )
        found.add(k - 1)
    return frozenset(found)


def read_kinds(path: Path, end_convention: str) -> dict[str, list[MetadataLine]]:
    """Parse ``anomaly_type.csv`` into entity -> lines carrying a kind (ranges not yet bounded)."""
    rows = list(csv.reader(_read_lines(path)))
    if not rows or [c.strip() for c in rows[0]] != list(KINDS_COLUMNS):
        got = ",".join(rows[0]) if rows else "an empty file"
        raise DataError(
            f"{path}: line 1: expected the header {','.join(KINDS_COLUMNS)}, got {got!r}"
        )
    out: dict[str, list[MetadataLine]] = {}
    for number, row in enumerate(rows[1:], start=2):
        if not row or not any(c.strip() for c in row):
            continue
        where = f"{path}: line {number}"
        if len(row) != len(KINDS_COLUMNS):
            raise DataError(f"{where}: {len(row)} fields, expected {len(KINDS_COLUMNS)}")
        entity, segment, kind = (c.strip() for c in row)
        if not entity or not kind:
            raise DataError(f"{where}: empty {'dataset' if not entity else 'anomaly_type'} field")
        start, end = parse_range(segment, end_convention, where)
        out.setdefault(entity, []).append(MetadataLine(start, end, number, kind=kind))
    return out


def _read_lines(path: Path) -> list[str]:
    try:
        return path.read_text(encoding="utf-8").splitlines()
    except UnicodeDecodeError:
        raise DataError(f"{path}: not a text file (cannot decode as UTF-8)") from None
    except OSError as exc:
        raise DataError(f"{path}: cannot read ({exc.strerror})") from None


def overlapping(events: tuple[Event, ...], start: int, end: int) -> range:
    """Indices of the (sorted, disjoint) events that overlap the inclusive range."""
    starts = np.fromiter((e.start for e in events), dtype=np.int64, count=len(events))
    ends = np.fromiter((e.end for e in events), dtype=np.int64, count=len(events))
    first = int(np.searchsorted(ends, start, side="left"))
    last = int(np.searchsorted(starts, end, side="right"))
    return range(first, max(first, last))


def attach_culprits(
    events: tuple[Event, ...], lines: list[MetadataLine], path: Path
) -> tuple[Event, ...]:
    """Events with the united KPIs of every line that overlaps them."""
    found: dict[int, set[int]] = {}
    for item in _matched(events, lines, path):
        i, line = item
        found.setdefault(i, set()).update(line.culprits or ())
    _warn_uncovered(events, found, path)
    return tuple(
        replace(e, culprits=tuple(sorted(found[i]))) if i in found else e
        for i, e in enumerate(events)
    )


def attach_kinds(
    events: tuple[Event, ...], lines: list[MetadataLine], path: Path, entity: str, n_test: int
) -> tuple[Event, ...]:
    """Events with the kind of the row(s) that overlap them; two different kinds is an error."""
    for line in lines:
        if line.end >= n_test:
            raise DataError(
                f"{path}: line {line.line}: range goes past the test part of entity "
                f"{entity!r} ({n_test} steps)"
            )
    found: dict[int, MetadataLine] = {}
    for i, line in _matched(events, lines, path):
        earlier = found.setdefault(i, line)
        if earlier.kind != line.kind:
            raise DataError(
                f"{path}: line {line.line}: kind {line.kind!r} for the event at test steps "
                f"{events[i].start}-{events[i].end} of entity {entity!r}, but line "
                f"{earlier.line} says {earlier.kind!r}"
            )
    _warn_uncovered(events, found, path, f" for entity {entity!r}")
    return tuple(replace(e, kind=found[i].kind) if i in found else e for i, e in enumerate(events))


def _matched(events: tuple[Event, ...], lines: list[MetadataLine], path: Path):
    """(event index, line) pairs by overlap; warns for each line that overlaps no event."""
    pairs = []
    for line in lines:
        hits = overlapping(events, line.start, line.end)
        if not hits:
            warnings.warn(
                f"{path}: line {line.line}: test steps {line.start}-{line.end} overlap no "
                "labelled event; line ignored",
                DataWarning,
                stacklevel=4,
            )
        pairs.extend((i, line) for i in hits)
    return pairs


def _warn_uncovered(events: tuple[Event, ...], found: dict, path: Path, suffix: str = "") -> None:
    missing = [f"{e.start}-{e.end}" for i, e in enumerate(events) if i not in found]
    if missing:
        warnings.warn(
            f"{path}: no line{suffix} for {len(missing)} labelled event(s) at test steps "
            f"{', '.join(missing)}; their metadata stays unknown",
            DataWarning,
            stacklevel=4,
        )
