"""Bulk queries in Spark: every block of queries against every part, merged per query."""

from __future__ import annotations

from pyspark.sql import DataFrame, SparkSession, Window
from pyspark.sql import functions as F
from pyspark.sql.types import (
    DoubleType,
    IntegerType,
    LongType,
    StringType,
    StructField,
    StructType,
)

from . import parts as _parts

# Queries per task: large enough that query_many's threads and the opening of a part pay
# off, small enough that a task's answers stay small.
BLOCK = 2048


def query(
    spark: SparkSession,
    index,
    queries: DataFrame,
    column: str,
    id_column: str | None = None,
    *,
    k: int | None = 10,
    exact: bool = False,
    within: float | None = None,
    block: int = BLOCK,
) -> DataFrame:
    """The neighbours of every query of ``queries[column]`` in ``index``, found in Spark.

    ``index`` is the path of an index (an index in parts, or one index file), or a list of
    index files taken as parts in that order. Each task answers one block of queries
    against one part: it opens the part itself (memory-mapped, kept open by the executor
    process for the next task) and asks ``query_many``; the parts' answers are merged per
    query in Spark, by distance, then id, then item number, the order of the library's own
    answers. ``exact=True`` and ``within`` are exact: each part's exact top k hold the
    exact top k of all parts. Approximate answers ask every part for its own ``k``
    approximate neighbours, so their recall is at least about that of each part alone.
    Removed items of an index in parts are skipped.

    ``k``: the neighbours per query; with ``within=R``, the ``k`` nearest within R, or with
    ``k=None`` every item within R. ``id_column``: the queries' ids (default: the 0-based
    position of the query in ``queries``).

    Returns a DataFrame of ``query_id``, ``rank`` (1 for the nearest), ``neighbour_id``,
    ``item`` (the neighbour as built) and ``distance``.
    """
    _check_queries("query", queries, column, id_column)
    if within is not None:
        within = _parts.check_radius("query", within)
    if k is None and within is None:
        raise ValueError("query: k=None asks for every item within a radius: give within as well")
    if k is not None and (isinstance(k, bool) or not isinstance(k, int) or k < 1):
        raise ValueError(f"query: k must be a whole number of at least 1, not {k!r}")
    if block < 1:
        raise ValueError(f"query: block must be at least 1, not {block!r}")
    parts = _parts.resolve(index)
    id_type = _parts.id_type(parts)

    if queries.where(F.col(column).isNull()).limit(1).count():
        raise ValueError(f"query: column {column!r} has a null query")
    # (position, (query id, text)): the position places a query in its block, and is the
    # query's id when no id column is given.
    if id_column is None:
        numbered = queries.select(column).rdd.zipWithIndex().map(lambda r: (r[1], (r[1], r[0][0])))
        qid_type = LongType()
    else:
        numbered = queries.select(id_column, column).rdd.zipWithIndex().map(lambda r: (r[1], (r[0][0], r[0][1])))
        qid_type = queries.schema[id_column].dataType

    # One Spark partition per (block of queries, part): each query goes to every part.
    count = numbered.count()
    blocks = max(1, -(-count // block))
    n_parts = len(parts)

    def spread(pair):
        position, row = pair
        b = position % blocks
        for p in range(n_parts):
            yield (b * n_parts + p, row)

    tasks = numbered.flatMap(spread)
    tasks = tasks.partitionBy(blocks * n_parts, lambda key: key)
    rule = (k, exact, within)

    def answer(split, rows):
        rows = [r for _, r in rows]
        if not rows:
            return
        part = parts[split % n_parts]
        k_, exact_, within_ = rule
        index = _parts.open_part(part.path)
        removed = set(part.removed)
        texts = [r[1] for r in rows]
        found = _parts.ranged(index, texts, k_, within_, exact_, len(removed))
        for (qid, _), (numbers, distances) in zip(rows, found):
            if removed:
                kept = [i for i, x in enumerate(numbers) if x not in removed]
                numbers, distances = [numbers[i] for i in kept], [distances[i] for i in kept]
            if k_ is not None:
                numbers, distances = numbers[:k_], distances[:k_]
            if not numbers:
                continue
            for n, d, i, item in zip(numbers, distances, index.ids(numbers), index.items(numbers)):
                yield (qid, part.first + n, i, item, d)

    schema = StructType(
        [
            StructField("query_id", qid_type),
            StructField("number", LongType()),
            StructField("neighbour_id", id_type),
            StructField("item", StringType()),
            StructField("distance", DoubleType()),
        ]
    )
    answers = spark.createDataFrame(tasks.mapPartitionsWithIndex(answer), schema)
    order = Window.partitionBy("query_id").orderBy("distance", "neighbour_id", "number")
    ranked = answers.withColumn("rank", F.row_number().over(order).cast(IntegerType()))
    if k is not None:
        ranked = ranked.where(F.col("rank") <= k)
    return ranked.select("query_id", "rank", "neighbour_id", "item", "distance")


def _check_queries(name: str, queries: DataFrame, column: str, id_column: str | None) -> None:
    for c in [column] + ([id_column] if id_column is not None else []):
        if c not in queries.columns:
            raise ValueError(f"{name}: the queries have no column {c!r} (columns: {queries.columns})")
    if not isinstance(queries.schema[column].dataType, StringType):
        raise ValueError(
            f"{name}: column {column!r} is {queries.schema[column].dataType.simpleString()}: queries must be strings"
        )
