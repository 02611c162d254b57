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
    BadArgumentError,
    BadInputError,
    CorruptIndexError,
    Index,
    MetricFailedError,
    WaymarkError,
    __version__,
    build,
    build_file,
    build_shard,
    group_pairs,
    list_parts,
    read_queries,
    write_parts,
)
from ._waymark import _default_candidates


def open(path, *, metric=None, metric_name=None, integral=False):  # noqa: A001 (module-level name of our API)
    """Opens the index at ``path`` (memory-mapped: cheap, so each worker process can open
    its own): an index file, or the list file of an index in parts (grown by ``waymark
    add``, or written by ``write_parts``). An index built with a distance written in Python
    needs the same callable again as ``metric`` (and the same ``metric_name`` if one was
    given)."""
    return Index(path, metric=metric, metric_name=metric_name, integral=integral)


def build_seed(items, path, *, total=None, candidates=None, **options):
    """Builds the seed of a sharded index at ``path``: an ordinary index of ``items`` (a
    sample of the whole input, a few thousand items), built as ``build`` builds one with the
    same keyword options, whose reference items, coordinate scale, metric and normalisation
    every shard then uses (``build_shard(..., like=path)``). ``total`` (the number of items
    the sharded index will hold) sets the default candidates stored, as a build of that many
    items would; without it, or with ``candidates``, as ``build`` does. No recall curve is
    measured. Returns the seed, opened."""
    if candidates is None and total is not None:
        candidates = _default_candidates(int(total))
    options["calibrate"] = False
    return build(items, path, candidates=candidates, **options)


__all__ = [
    "BadArgumentError",
    "BadInputError",
    "CorruptIndexError",
    "Index",
    "MetricFailedError",
    "WaymarkError",
    "__version__",
    "build",
    "build_file",
    "build_seed",
    "build_shard",
    "group_pairs",
    "list_parts",
    "open",
    "read_queries",
    "write_parts",
]
