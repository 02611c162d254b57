"""Type stubs of the waymark package (the extension module waymark._waymark)."""

from os import PathLike
from typing import Any, Callable, Literal, Sequence, overload

import numpy as np
import numpy.typing as npt

__version__: str

Id = int | str
"""An item's id: an int (the item's 0-based position by default) or a str, as built."""

Answer = list[tuple[Id, str, float]]
"""One query's answer: (id, item, distance) per neighbour, nearest first (ties by id)."""

Distance = Callable[[str, list[str]], Sequence[float] | npt.NDArray[np.floating]]
"""A distance written in Python: ``f(query, items)`` returns one distance per item.

It is called once per batch (all of a query's candidates at once, its landmarks, a chunk of
items at build time) with the GIL held, so it runs one call at a time whatever the number
of threads. Slow but honest: for prototyping a metric before writing it in Rust. It must be
a metric (zero on equal items, symmetric, the triangle inequality): ``build`` checks a
sample of 40 items and warns when a rule breaks. Every distance must be a finite number of
at least 0; an exception or another result stops the work with ``MetricFailedError`` (and
the metric stays failed: open the index again after fixing it).
"""

MetricName = Literal[
    "levenshtein", "damerau", "hamming", "weighted", "jaccard", "token-edit",
    "l1", "l2", "linf", "angular", "graph", "external",
]

class WaymarkError(Exception):
    """Base class of every error waymark raises; the message is the library's."""

class BadInputError(WaymarkError):
    """Bad input or a bad argument: items or ids, a query the metric cannot take (a vector
    of another dimension, a Hamming query of another length, not a node of the graph), an
    option out of range, a file that cannot be read or written."""

class BadArgumentError(BadInputError, ValueError):
    """An integer argument out of range: a negative ``k``, ``candidates``, ``dim``,
    ``seed``, ``widen``... or one too large for its type (``k=10**30``). The message names
    the argument and the value given: ``k must be a positive integer, got -1``. Zero where
    at least 1 is needed (``k=0``) is refused with the command line's message, ``k must be
    at least 1``, as a ``BadInputError``."""

class CorruptIndexError(WaymarkError):
    """The index file was refused: not an index, another format version, corrupt or
    truncated, or built with a Python distance that was not supplied (or another one)."""

class MetricFailedError(WaymarkError):
    """The metric failed: a Python distance raised or returned something that is not one
    distance per item, or an external metric program exited, hung or broke its protocol."""

def build(
    items: Sequence[str] | npt.NDArray[np.float32],
    path: str | PathLike[str],
    *,
    ids: Sequence[int] | Sequence[str] | None = None,
    metric: MetricName | Distance | None = None,
    metric_name: str | None = None,
    integral: bool = False,
    costs: str | PathLike[str] | None = None,
    separator: str | None = None,
    qgrams: int | None = None,
    command: Sequence[str] | None = None,
    timeout: float = 30.0,
    dim: int = 64,
    embedding: Literal["landmarks", "refsets", "fastmap"] = "landmarks",
    pool: int = 32,
    seed: int = 0,
    candidates: int | None = None,
    space: Literal["l1", "l2", "linf"] = "l2",
    landmark_sample: int = 4096,
    landmark_rule: Literal["farthest", "trimmed"] = "farthest",
    fold_case: bool = False,
    trim: bool = False,
    fold_punct: bool = False,
    sort_tokens: bool = False,
    small_radius: Literal[1, 2] | None = None,
    widen: int = 0,
    calibrate: bool = True,
) -> Index:
    """Builds an index of ``items`` at ``path`` (written atomically: a failed build leaves
    any old file as it was) and opens it.

    ``items`` is a list of strings, or a 2-D ``float32`` numpy array of vectors (one row per
    item; ``metric`` then defaults to ``"l2"`` and must be a vector metric; the rows are read
    in place, and only what the file stores is made from them). ``ids``: one per item, ints
    or strs; default the items' 0-based positions. Blank items (after the normalisations) are
    skipped, as blank records of a file are.

    ``metric``: a name (default ``"levenshtein"`` for strings), or a Python callable
    (``Distance``), recorded in the index by ``metric_name`` (default its ``__name__``);
    ``integral=True`` says its distances are whole numbers. The other options are those of
    ``waymark build``: ``costs`` (weighted: the cost file), ``separator``/``qgrams``
    (jaccard), ``command``/``timeout`` (external), ``dim``, ``embedding``, ``pool``,
    ``seed``, ``candidates`` and ``space`` (query defaults stored in the index),
    ``landmark_sample``, ``landmark_rule``, the normalisations (stored and applied to every
    query), ``small_radius`` (1 or 2: also store the deletion-variant table of exact
    small-radius queries, as ``--small-radius``), ``widen`` (rounds of widening stored as the
    query default, as ``--widen``), and ``calibrate=False`` for
    ``--no-calibration`` (then ``recall=`` is refused).
    A graph index is built from its edge list with ``build_file``.
    """

def build_file(
    input: str | PathLike[str],
    path: str | PathLike[str],
    *,
    metric: MetricName = "levenshtein",
    field: str | None = None,
    id_field: str | None = None,
    input_format: Literal["text", "csv", "tsv", "jsonl", "fasta", "fastq"] | None = None,
    header: bool = False,
    costs: str | PathLike[str] | None = None,
    separator: str | None = None,
    qgrams: int | None = None,
    command: Sequence[str] | None = None,
    timeout: float = 30.0,
    dim: int = 64,
    embedding: Literal["landmarks", "refsets", "fastmap"] = "landmarks",
    pool: int = 32,
    seed: int = 0,
    candidates: int | None = None,
    space: Literal["l1", "l2", "linf"] = "l2",
    landmark_sample: int = 4096,
    landmark_rule: Literal["farthest", "trimmed"] = "farthest",
    fold_case: bool = False,
    trim: bool = False,
    fold_punct: bool = False,
    sort_tokens: bool = False,
    small_radius: Literal[1, 2] | None = None,
    widen: int = 0,
    calibrate: bool = True,
) -> Index:
    """Builds an index of the file ``input`` at ``path``, reading it exactly as
    ``waymark build INPUT`` does (text lines, CSV/TSV columns, JSON Lines fields, FASTA and
    FASTQ records, vectors one per line or a ``.npy`` file, a graph's edge list), with the
    same options under the same names, and opens it. The same input and options give a
    byte-identical file."""

def group_pairs(
    a: Sequence[int],
    b: Sequence[int],
    distance: Sequence[float],
    *,
    grouping: Literal["centre", "clique", "components"] = "centre",
    singletons: bool = False,
) -> list[tuple[list[int], int | None]]:
    """Groups near-duplicates from pairs, by the rules of ``waymark groups``: pair ``i`` joins
    the items labelled ``a[i]`` and ``b[i]`` (any integers, such as item numbers or integer
    ids) at ``distance[i]``. ``centre`` (every member within the pairs' radius of its
    centre), ``clique`` (every two members paired) or ``components`` (chains included).
    Ties fall to the smaller label, as they fall to the smaller item number in
    ``waymark groups``, so the groups of an index's pairs given by item number are the
    command's. Returns ``(members, centre)`` per group: members ascending, the centre under
    ``centre`` (else ``None``), groups ordered by their smallest member; labels only paired
    with themselves are left out unless ``singletons``. Raises ``BadInputError`` for lists
    of different lengths, a distance that is not finite and at least 0, or an unknown
    grouping."""

def open(
    path: str | PathLike[str],
    *,
    metric: Distance | None = None,
    metric_name: str | None = None,
    integral: bool = False,
) -> Index:
    """Opens an index: an index file, or the list file of an index in parts (grown by
    ``waymark add``, or written by ``write_parts``); see ``Index``."""

def build_seed(
    items: Sequence[str] | npt.NDArray[np.float32],
    path: str | PathLike[str],
    *,
    total: int | None = None,
    candidates: int | None = None,
    **options: Any,
) -> Index:
    """Builds the seed of a sharded index at ``path``: an ordinary index of ``items``, a
    sample of the whole input (a few thousand items chosen at random), built by ``build``
    with the same keyword options (metric, dim, embedding, seed, landmark_sample,
    normalisation, …). Its reference items, coordinate scale, metric and normalisation are
    the embedding every shard uses (``build_shard(..., like=path)``); the seed itself is not
    a part of the sharded index. ``total``, the number of items the sharded index will
    hold, sets the default candidates stored as a build of that many items would (give
    ``candidates`` to choose them). No recall curve is measured, so ``query(recall=...)`` on
    the sharded index is refused: give ``candidates``. Returns the seed, opened."""

def build_shard(
    items: Sequence[str] | npt.NDArray[np.float32],
    folder: str | PathLike[str],
    shard: int,
    *,
    like: str | PathLike[str],
    ids: Sequence[int] | Sequence[str] | None = None,
    first_number: int | None = None,
) -> str:
    """Embeds ``items`` against the reference items of the seed index at ``like`` (its
    metric and normalisation too) and writes them as shard number ``shard`` (0 to 1023) in
    ``folder`` (created if missing); returns the file's path,
    ``folder/shard-NNNNN-HASH.wmk`` (HASH: the first 16 hex digits of the file's SHA-256).

    The ids are ``ids`` (one per item), or the record numbers ``first_number``,
    ``first_number + 1``, … where ``first_number`` is the number of items of the shards
    before this one (shard 0: 0), so that ids count across the shards in shard order as a
    build of all the items would number them. One of the two is required.

    The file is written under a hidden temporary name in ``folder`` and renamed: a task
    killed midway leaves no shard file, and a task run twice (retried or speculative) with
    the same items writes the same bytes under the same name, so one file remains; the hidden
    files that killed writers of the same shard left in ``folder`` are removed when it is
    written again (only those, and only when no live writer holds them). Raises
    ``BadInputError`` for a shard number out of range, items the seed's metric cannot take,
    or a seed whose metric is a graph or a Python distance (not shardable)."""

def write_parts(
    index_path: str | PathLike[str], part_paths: Sequence[str | PathLike[str]]
) -> None:
    """Writes the list file of a sharded index at ``index_path`` for the shard files
    ``part_paths`` (any order: listed by shard number), atomically, after linking (or
    copying) each into the index's parts folder ``INDEX.parts/``. The index then opens with
    ``open`` and takes ``waymark query``, ``add``, ``remove`` and ``compact``. Refused with
    ``BadInputError`` (nothing written): shard numbers that are not 0, 1, …, N-1 each once
    (a shard missing, two files of one shard), a file that does not exist, shards built from
    different seeds (their embeddings differ), ids of different kinds; with
    ``CorruptIndexError``: a file whose contents do not have the checksum its name carries.
    Files in ``INDEX.parts/`` that the list does not name are removed."""

def list_parts(index_path: str | PathLike[str]) -> list[dict[str, Any]]:
    """The parts of the index at ``index_path``, in item-number order: ``path`` (the part
    file; the index file itself for an index of one file), ``items`` (removed ones
    included), ``removed`` (item numbers within the part that are removed) and ``first``
    (the item number across the parts of its first item)."""

def read_queries(
    path: str | PathLike[str], *, format: Literal["text", "fasta", "fastq"] | None = None
) -> list[tuple[int, str | None, str]]:
    """The queries of the file at ``path``, as ``waymark query --queries FILE
    --query-format FORMAT`` reads them: ``text``, one query per line (``\\r\\n`` and a
    leading byte-order mark dropped); ``fasta`` or ``fastq``, one query per record, its
    sequence (a FASTA record's lines joined), also gzip-compressed. Without ``format``, by
    the file's name as the command line takes it: FASTA for ``.fa``, ``.fasta``, ``.fna``,
    FASTQ for ``.fq``, ``.fastq`` (also with ``.gz``), else text.

    Returns ``(line, name, query)`` per query, in file order: the 1-based line (a record's
    header line), the record's name (the first word of its header; ``None`` for a text
    line) and the query text, the ``line``, ``name`` and ``query`` of the command line's
    answers. Pass the texts to ``query_many``::

        reads = waymark.read_queries("reads.fq")
        numbers, distances = index.query_many([q for _, _, q in reads], k=1)

    Raises ``BadInputError`` naming the file and line for a malformed record or a line
    that is not UTF-8 (the command line's words), and naming the file for a folder, a file
    that cannot be read or one with no query."""

class Index:
    """An open, memory-mapped index. Opening is cheap; an index is safe to share between
    threads (queries take no lock, and release the GIL while they run), and each worker
    process can open its own."""

    def __init__(
        self,
        path: str | PathLike[str],
        *,
        metric: Distance | None = None,
        metric_name: str | None = None,
        integral: bool = False,
    ) -> None:
        """Opens the index at ``path``. An index built with a Python distance needs the
        same callable again as ``metric`` (an index of another metric is refused)."""

    def __len__(self) -> int:
        """The number of items (of an index in parts: the items not removed; item numbers
        run across the parts and skip none, so a removed item's number stays unused)."""

    @property
    def path(self) -> str:
        """The file the index was opened from."""

    @property
    def metric(self) -> str:
        """The metric's name (``levenshtein``, ``l2``, …, or a Python distance's name)."""

    @property
    def python_metric(self) -> bool:
        """Whether the metric is a Python callable."""

    def query(
        self,
        query: str | Sequence[float] | npt.NDArray[np.floating],
        k: int | None = None,
        *,
        exact: bool = False,
        within: float | None = None,
        within_fraction: float | None = None,
        recall: float | None = None,
        candidates: int | None = None,
        space: Literal["l1", "l2", "linf"] | None = None,
        candidates_from: Literal["cells", "scan", "tree", "counts"] | None = None,
        visit: int | None = None,
        widen: int | None = None,
    ) -> Answer:
        """One query: its neighbours as (id, item, distance), nearest first.

        By default the ``k`` (10) nearest, approximately, with the index's stored defaults;
        ``recall=R`` (0 < R < 1) chooses the candidates from the index's recall curve, as
        ``waymark query --recall`` (the curve weighed by the query's length; in
        ``query_many``, by the lengths of all the queries): a mean threshold recall@10 over
        queries like the build's edited items, not a promise for each query; ``candidates``, ``space``, ``candidates_from``,
        ``visit`` and ``widen`` tune the approximate search (``visit`` only with cells:
        with ``candidates_from="scan"``, ``"tree"`` or ``"counts"`` it raises
        ``BadInputError``, as the command line refuses it). On a plain Levenshtein index
        the default source is ``"counts"``: the items in increasing char-count bound,
        measured until the answers settle, which are then a brute force's up to the order
        of ties; ``candidates``, ``visit`` or ``space`` search the embedding instead. ``exact=True``: the exact k nearest (what a
        brute force returns). ``within=R``: every item at distance at most R, exactly, or
        only the ``k`` nearest of them when ``k`` is given. ``within_fraction=F``: every item
        within F × the longer one's length in chars, exactly (text metrics), as ``within``
        for ``k``. A query is a string, or for a
        vector index a sequence of numbers; a query the metric cannot take raises
        ``BadInputError``."""

    def query_many(
        self,
        queries: Sequence[str] | Sequence[Sequence[float]] | npt.NDArray[np.floating],
        k: int = 10,
        *,
        exact: bool = False,
        within: float | None = None,
        within_fraction: float | None = None,
        recall: float | None = None,
        candidates: int | None = None,
        space: Literal["l1", "l2", "linf"] | None = None,
        candidates_from: Literal["cells", "scan", "tree", "counts"] | None = None,
        visit: int | None = None,
        widen: int | None = None,
    ) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.float64]]:
        """Many queries at once, on all cores with the GIL released (options as ``query``).

        Returns ``(numbers, distances)``, two arrays of shape (len(queries), k): row i holds
        query i's item numbers and distances, nearest first, filled with -1 and ``inf``
        where fewer than k are found (``within``). Map numbers to ids with ``ids`` and to
        items with ``items``. A query the metric cannot take raises ``BadInputError`` naming
        its position (``queries[3]: …``); a ``k`` whose arrays would not fit in memory
        raises ``BadArgumentError``."""

    def pairs_within(
        self,
        within: float | None = None,
        *,
        within_fraction: float | None = None,
        other: Index | None = None,
    ) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.int64], npt.NDArray[np.float64]]:
        """Every pair within a radius, exactly, on all cores with the GIL released: at true
        distance at most ``within``, or at most ``within_fraction`` of the longer item's
        length in chars (give one of the two).

        Without ``other``: every pair of distinct items of this index, each once, the pairs
        of ``waymark pairs --within`` (the same join, its deletion-variant table included).
        With ``other`` (an index of the same metric and normalisation): every pair of an item
        of this index and an item of ``other``, through this index's deletion-variant table
        for radii up to 2 (stored, or built in memory when it fits), else by exact range
        queries of ``other``'s items. The pairs of each of several indexes and of every two
        of them are the pairs of one index of all their items, each once.

        Returns ``(a, b, distances)``, three 1-D arrays with one element per pair: item
        numbers ``a`` (``a < b`` without ``other``; in this index with it), ``b`` (in
        ``other`` when given) and the distances. Only for an index of one file (an index in
        parts raises ``BadInputError``: ask its part files, or compact it). Indexes that
        differ in metric or normalisation, or a radius out of range, raise
        ``BadInputError``."""

    def id(self, number: int) -> Id:
        """The id of item ``number`` (0 ≤ number < len(index) for an index of one file;
        over parts, numbers run across the parts, and a removed item's number raises
        ``IndexError``)."""

    def item(self, number: int) -> str:
        """Item ``number`` as given at build time."""

    def ids(self, numbers: Sequence[int] | npt.NDArray[np.int64]) -> list[Any]:
        """The ids of item numbers: a list shaped as ``numbers`` (1-D, or a list of lists for
        a 2-D array), with None where a number is the fill value -1."""

    def items(self, numbers: Sequence[int] | npt.NDArray[np.int64]) -> list[Any]:
        """The items of item numbers, shaped and filled as ``ids``."""

    def inspect(self, *, verify: bool = False) -> dict[str, Any]:
        """What the index holds, as ``waymark inspect --json`` prints it (path, format
        version, file size, ``meta`` with the metric, normalisation, embedding, defaults and
        recall curve, the reference items, every section's size). For an index in parts, as
        ``waymark inspect --json`` prints a list file: ``format`` "parts", the
        ``fingerprint``, ``items``, ``live``, ``parts`` (file, items, removed, bytes, drift)
        and ``first`` (the first part's report). ``verify=True`` first checks every
        checksum (a full read; ``CorruptIndexError`` on damage)."""

    def eval(
        self,
        queries: Sequence[str] | npt.NDArray[np.floating],
        k: int = 10,
        *,
        candidates: Sequence[int] | None = None,
        recall: Sequence[float] | None = None,
        space: Literal["l1", "l2", "linf"] | None = None,
        candidates_from: Literal["cells", "scan", "tree", "counts"] | None = None,
        visit: int | None = None,
    ) -> dict[str, Any]:
        """Recall against brute force, as ``waymark eval --queries``: the exact k nearest of
        every query by a full scan on all cores, then one row per candidate count (default
        250, 500, 1000, 2000) or per asked recall, with threshold and plain recall@k,
        distances per query, queries per second and latency percentiles (the keys of
        ``waymark eval --json``'s ``recall`` rows). Refused (``BadInputError``) on an index
        in parts: compact it first."""

    def distortion(self, *, pairs: int = 100_000) -> dict[str, Any]:
        """The distortion of the embedding, as ``waymark eval --distortion --pairs``: the
        ratio embedded / true distance over item pairs, per space (L1, L2, L∞). Refused on
        an index in parts, as ``eval``."""
