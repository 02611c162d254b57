"""The parts a Spark job reads, and the indexes each executor process keeps open.

An index for the jobs is either an index in parts (a list file naming part files in
``INDEX.parts/``), an ordinary index file (one part), or a list of ordinary index files
taken as parts in that order. Item numbers run across the parts in order, as they do in an
index in parts; each part's removed items (from the list file) are skipped.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

from pyspark.sql.types import DataType, LongType, StringType

_LIST_MAGIC = b"WMKPARTS"


@dataclass(frozen=True)
class Part:
    """One part: its file, its first item number across the parts, its item count
    (removed ones included) and its removed item numbers (local, ascending)."""

    path: str
    first: int
    items: int
    removed: tuple[int, ...] = field(default=())


def resolve(index) -> list[Part]:
    """The parts of ``index`` (a path, or a list of paths of ordinary index files), checked
    on the driver: every file opens (a corrupt one is refused here, not on an executor)."""
    import waymark

    if isinstance(index, (list, tuple)):
        if not index:
            raise ValueError("no parts: the list of part files is empty")
        parts, first = [], 0
        for path in index:
            path = os.fspath(path)
            if _is_list(path):
                raise ValueError(f"{path}: an index in parts is given by its list file alone, not among part files")
            n = len(open_part(path))
            parts.append(Part(os.path.abspath(path), first, n))
            first += n
        return parts
    path = os.fspath(index)
    if not os.path.exists(path):
        raise ValueError(f"{path}: no such index")
    if not _is_list(path):
        return [Part(os.path.abspath(path), 0, len(open_part(path)))]
    if not hasattr(waymark, "list_parts"):  # pragma: no cover - an older package
        raise ValueError(f"{path}: an index in parts needs a waymark package with list_parts")
    parts = []
    for p in waymark.list_parts(path):
        part = Part(os.path.abspath(p["path"]), int(p["first"]), int(p["items"]), tuple(sorted(p["removed"])))
        if len(open_part(part.path)) != part.items:
            raise ValueError(f"{part.path}: holds {len(open_part(part.path))} items, its list says {part.items}")
        parts.append(part)
    return parts


def _is_list(path: str) -> bool:
    try:
        with open(path, "rb") as f:
            return f.read(len(_LIST_MAGIC)) == _LIST_MAGIC
    except (IsADirectoryError, FileNotFoundError):
        return False


# Per executor process (Spark reuses its Python workers): the indexes opened so far. A part
# file is memory-mapped, so keeping it open costs address space, not memory. The key holds the
# file's inode and modification time, so that a file replaced under the same name is opened
# again.
_OPEN: dict = {}


def open_part(path: str):
    """The open index at ``path``, from this process's cache."""
    import waymark

    st = os.stat(path)
    key = (path, st.st_ino, st.st_mtime_ns, st.st_size)
    index = _OPEN.get(key)
    if index is None:
        index = waymark.open(path)
        _OPEN[key] = index
    return index


def id_type(parts: list[Part]) -> DataType:
    """The Spark type of the items' ids: long for integer ids, string for text ids."""
    index = open_part(parts[0].path)
    return LongType() if isinstance(index.id(0), int) else StringType()


def check_radius(name: str, within) -> float:
    """``within`` as a float, or a ValueError that says why not."""
    if isinstance(within, bool) or not isinstance(within, (int, float)):
        raise ValueError(f"{name}: within must be a number, not {within!r}")
    if not math.isfinite(within) or within < 0:
        raise ValueError(f"{name}: within must be a finite number of at least 0, not {within!r}")
    return float(within)


def ranged(index, texts, k: int | None, within: float | None, exact: bool, extra: int):
    """Each query's answers in one part, nearest first (distance, id, number), as a pair of
    lists (numbers, distances) per query: the ``k + extra`` nearest, or with ``k`` None every
    item within ``within`` (rows that come back full are asked again with four times the
    room, until none is full, so the answer is complete)."""
    if not texts:
        return []
    n = len(index)
    if k is not None:
        numbers, distances = index.query_many(texts, k=min(k + extra, n), exact=exact, within=within)
        return _rows(numbers, distances)
    out = [None] * len(texts)
    pending = list(range(len(texts)))
    room = 16
    while pending:
        room = min(room, n)
        numbers, distances = index.query_many([texts[i] for i in pending], k=room, within=within)
        rows = _rows(numbers, distances)
        again = []
        for i, row in zip(pending, rows):
            if room < n and len(row[0]) == room:
                again.append(i)
            else:
                out[i] = row
        pending = again
        room *= 4
    return out


def _rows(numbers, distances):
    """The found (non-fill) numbers and distances of each row, as Python lists."""
    counts = (numbers >= 0).sum(axis=1).tolist()
    ns, ds = numbers.tolist(), distances.tolist()
    return [(a[:c], b[:c]) for a, b, c in zip(ns, ds, counts)]
