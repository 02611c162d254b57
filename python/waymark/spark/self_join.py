"""All pairs within a radius across every part of an index, in Spark (deduplication)."""

from __future__ import annotations

from pyspark.sql import DataFrame, SparkSession
from pyspark.sql.types import DoubleType, LongType, StringType, StructField, StructType

from . import parts as _parts

# Items per task asked as range queries against one part.
BLOCK = 4096


def pairs(spark: SparkSession, index, *, within: float, block: int = BLOCK) -> DataFrame:
    """Every pair of distinct live items of ``index`` at true distance at most ``within``,
    each pair once: the pairs of ``waymark pairs --within R`` on one index of the same
    items, exactly.

    ``index`` is the path of an index (in parts, or one file), or a list of index files
    taken as parts in that order; item numbers run across the parts in that order. Each task
    takes a block of one part's items and asks them, as exact range queries
    (``query_many(within=R)``), of one part at or after their own, so that every pair is
    looked for once; a pair is kept from the side of its smaller item number. An index built
    with ``small_radius`` (1 or 2) answers radii up to it through its deletion-variant
    table, much faster.

    Returns a DataFrame of ``id_a``, ``id_b``, ``item_a``, ``item_b``, ``distance``,
    ``number_a`` and ``number_b`` (item numbers across the parts, ``number_a <
    number_b``; they are the labels under which :func:`groups` gives the groups of
    ``waymark groups``).
    """
    within = _parts.check_radius("pairs", within)
    if block < 1:
        raise ValueError(f"pairs: block must be at least 1, not {block!r}")
    parts = _parts.resolve(index)
    id_type = _parts.id_type(parts)
    tasks = []
    for j, pj in enumerate(parts):
        for start in range(0, pj.items, block):
            for i in range(j, len(parts)):
                tasks.append((j, start, min(start + block, pj.items), i))

    def answer(task):
        j, start, end, i = task
        asker, asked = parts[j], parts[i]
        source = _parts.open_part(asker.path)
        target = _parts.open_part(asked.path)
        gone_a, gone_b = set(asker.removed), set(asked.removed)
        numbers = [n for n in range(start, end) if n not in gone_a]
        texts = source.items(numbers)
        found = _parts.ranged(target, texts, None, within, True, 0)
        # Numbers across the parts: a pair is kept from its smaller number's side.
        offset = asked.first - asker.first
        for a, text, (bs, ds) in zip(numbers, texts, found):
            keep = [i for i, b in enumerate(bs) if b + offset > a and b not in gone_b]
            if not keep:
                continue
            bs, ds = [bs[i] for i in keep], [ds[i] for i in keep]
            id_a = source.id(a)
            for b, d, id_b, item_b in zip(bs, ds, target.ids(bs), target.items(bs)):
                yield (id_a, id_b, text, item_b, d, asker.first + a, asked.first + b)

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
