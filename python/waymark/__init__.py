"""Near-neighbour search for items that are not vectors, in-process.

waymark builds an index of items (strings under an edit distance, token sets, vectors, graph
nodes, or a distance of your own written in Python), stores it in one memory-mapped file, and
answers k-nearest and range queries: approximate by default (candidates by landmark
coordinates, re-ranked by the true distance), exact on request.

    >>> import waymark
    >>> index = waymark.build(["Orvane Quay", "Keth Landing"], "harbours.wmk", dim=2)
    >>> index.query("Orvane Qay", k=1)
    [(0, 'Orvane Quay', 1.0)]

Approximate answers can miss a true neighbour, and a close spelling is not proof of the same
record: check matches before merging records.

The names below are documented in ``__init__.pyi`` (type stubs with docstrings).
"""

from ._waymark import (
    BadInputError,
    CorruptIndexError,
    Index,
    MetricFailedError,
    WaymarkError,
    __version__,
    build,
    build_file,
    group_pairs,
)


def open(path, *, metric=None, metric_name=None, integral=False):  # noqa: A001 (module-level name of our API)
    """Opens the index file at ``path`` (memory-mapped: cheap, so each worker process can
    open its own). An index built with a distance written in Python needs the same
    callable again as ``metric`` (and the same ``metric_name`` if one was given)."""
    return Index(path, metric=metric, metric_name=metric_name, integral=integral)


__all__ = [
    "BadInputError",
    "CorruptIndexError",
    "Index",
    "MetricFailedError",
    "WaymarkError",
    "__version__",
    "build",
    "build_file",
    "group_pairs",
    "open",
]
