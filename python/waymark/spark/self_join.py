"""All pairs within a radius across every part of an index, in Spark (deduplication)."""

from __future__ import annotations

from pyspark.sql import DataFrame, SparkSession
from pyspark.sql.types import DoubleType, LongType, StringType, StructField, StructType

from . import parts as _parts

# Pairs turned into rows at once.
BLOCK = 4096


def pairs(spark: SparkSession, index, *, within: float, block: int = BLOCK) -> DataFrame:
    """Every pair of distinct live items of ``index`` at true distance at most ``within``,
    each pair once: the pairs of ``waymark pairs --within R`` on one index of the same
    items, exactly.

    ``index`` is the path of an index (in parts, or one file), or a list of index files
    taken as parts in that order; item numbers run across the parts in that order. One task
    per part takes the pairs within that part (:meth:`waymark.Index.pairs_within`, the
    self-join of ``waymark pairs``), and one task per two parts the pairs across them
    (``pairs_within(other=...)``): every pair is looked for once. An index built with
    ``small_radius`` (1 or 2) answers radii up to it through its deletion-variant table;
    without one, a table is built in memory for radii up to 2 when it fits.

    Returns a DataFrame of ``id_a``, ``id_b``, ``item_a``, ``item_b``, ``distance``,
    ``number_a`` and ``number_b`` (item numbers across the parts, ``number_a <
    number_b``; they are the labels under which :func:`groups` gives the groups of
    ``waymark groups``). ``block`` is the pairs turned into rows at once.
    """
    within = _parts.check_radius("pairs", within)
    if block < 1:
        raise ValueError(f"pairs: block must be at least 1, not {block!r}")
    parts = _parts.resolve(index)
    id_type = _parts.id_type(parts)
    # The biggest tasks first, so that the last ones to finish are short.
    tasks = [(j, i) for j in range(len(parts)) for i in range(j, len(parts))]
    tasks.sort(key=lambda t: -(parts[t[0]].items * parts[t[1]].items))

    def answer(task):
        import numpy as np

        j, i = task
        first, second = parts[j], parts[i]
        one = _parts.open_part(first.path)
        other = _parts.open_part(second.path)
        if i == j:
            a, b, d = one.pairs_within(within)
        else:
            a, b, d = one.pairs_within(within, other=other)
        keep = np.ones(len(a), dtype=bool)
        if first.removed:
            keep &= ~np.isin(a, first.removed)
        if second.removed:
            keep &= ~np.isin(b, second.removed)
        a, b, d = a[keep], b[keep], d[keep]
        for s in range(0, len(a), block):
            ab, bb = a[s : s + block], b[s : s + block]
            rows = zip(
                one.ids(ab),
                other.ids(bb),
                one.items(ab),
                other.items(bb),
                d[s : s + block].tolist(),
                (ab + first.first).tolist(),
                (bb + second.first).tolist(),
            )
            yield from rows

    schema = StructType(
        [
            StructField("id_a", id_type),
            StructField("id_b", id_type),
            StructField("item_a", StringType()),
            StructField("item_b", StringType()),
            StructField("distance", DoubleType()),
            StructField("number_a", LongType()),
            StructField("number_b", LongType()),
        ]
    )
    rdd = spark.sparkContext.parallelize(tasks, max(1, len(tasks))).flatMap(answer)
    return spark.createDataFrame(rdd, schema)
