"""A sharded build in Spark: references chosen once on the driver, one part per partition
built on the executors, the list file written last."""

from __future__ import annotations

import functools
import os
import shutil

from pyspark.sql import DataFrame, SparkSession
from pyspark.sql import functions as F
from pyspark.sql.types import IntegralType, StringType

# Items drawn on the driver for the seed (the references are chosen among them).
SAMPLE = 4096


def build(
    spark: SparkSession,
    df: DataFrame,
    column: str,
    index_path,
    id_column: str | None = None,
    *,
    shards: int | None = None,
    sample: int = SAMPLE,
    seed: int = 0,
    on_written=None,
    **options,
) -> str:
    """Builds an index in parts of ``df[column]`` at ``index_path``, in Spark, and returns
    its path.

    The driver draws ``sample`` items (Spark's ``takeSample`` with ``seed``) and builds the
    seed index from them (``waymark.build_seed`` with ``options``, the keywords of
    ``waymark.build``; ``total`` set to the items' count, so that the stored default
    candidates are those of an index of every item): the references every part is embedded
    against. The items are cut into ``shards`` consecutive runs of ``df``'s order (default:
    as many as ``df`` has partitions; at most 1,024, and no more than the items), and each run
    is then built into one part on an executor (``waymark.build_shard``) in the staging
    folder ``INDEX.shards/`` beside ``index_path``, which every executor must be able to
    write and read (shared storage on a cluster). A part's file name holds its shard number
    and a checksum of its content, and is written to a temporary file and renamed: a task
    that fails and runs again writes the same file, never a second or a torn one. The list
    file is written last, by the driver (``waymark.write_parts``, which links the parts into
    ``INDEX.parts/``; the staging folder is then removed); until then no index is at
    ``index_path``.

    Item numbers follow ``df``'s order across the parts; ids are ``df[id_column]``
    (integers or strings) or, by default, those item numbers. Null items are refused; blank
    ones (empty or only spaces) are left out, as ``waymark build`` leaves out blank
    records. ``on_written(shard, path)``, if given, is called on the executor after each
    part is written (for logging; an exception there fails the task, which Spark runs
    again).
    """
    import waymark

    for c in [column] + ([id_column] if id_column is not None else []):
        if c not in df.columns:
            raise ValueError(f"build: the items have no column {c!r} (columns: {df.columns})")
    if not isinstance(df.schema[column].dataType, StringType):
        raise ValueError(f"build: column {column!r} is {df.schema[column].dataType.simpleString()}: items must be strings")
    if id_column is not None and not isinstance(df.schema[id_column].dataType, (StringType, IntegralType)):
        raise ValueError(
            f"build: column {id_column!r} is {df.schema[id_column].dataType.simpleString()}: ids must be integers or strings"
        )
    if shards is not None and (isinstance(shards, bool) or not isinstance(shards, int) or not 1 <= shards <= 1024):
        raise ValueError(f"build: shards must be a whole number from 1 to 1024, not {shards!r}")
    if isinstance(sample, bool) or not isinstance(sample, int) or sample < 1:
        raise ValueError(f"build: sample must be a whole number of at least 1, not {sample!r}")
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed < 2**64:
        raise ValueError(f"build: seed must be a whole number from 0 to 2**64 - 1, not {seed!r}")
    # The build options' integers (dim, pool, ...) are checked by waymark.build_seed, before any
    # file is written: a negative one raises waymark.BadArgumentError (a ValueError).
    index_path = os.path.abspath(os.fspath(index_path))
    if os.path.isdir(index_path):
        raise ValueError(f"build: {index_path} is a folder; give the path of the index (its list file)")

    cols = [column] + ([id_column] if id_column is not None else [])
    nulls = df.where(functools.reduce(lambda a, b: a | b, [F.col(c).isNull() for c in cols]))
    if nulls.limit(1).count():
        raise ValueError(f"build: a row has a null in {' or '.join(repr(c) for c in cols)}")
    live = df.select(*cols).where(F.trim(F.col(column)) != "")

    numbered = items = live.rdd.map(tuple).zipWithIndex().cache()
    total = items.count()
    if total == 0:
        raise ValueError(f"build: column {column!r} has no items (all null or blank)")

    drawn = [r[0][0] for r in items.takeSample(False, min(sample, total), seed)]
    # The seed and the shards are written to a staging folder beside the index; write_parts
    # links the shards into INDEX.parts/ and writes the list, and the folder is then removed.
    staging = index_path + ".shards"
    made = not os.path.exists(staging)
    os.makedirs(staging, exist_ok=True)
    seed_path = os.path.join(staging, "seed.wmk")
    # total: the seed stores the default candidates of an index of every item. Refused (a
    # bad option): the staging folder goes too, when this call made it.
    try:
        waymark.build_seed(drawn, seed_path, total=total, seed=seed, **options)
    except BaseException:
        if made:
            shutil.rmtree(staging, ignore_errors=True)
        raise

    # Consecutive runs of item numbers, one per shard, none empty: the same on every attempt.
    if shards is None:
        shards = min(df.rdd.getNumPartitions(), 1024)
    shards = min(shards, total)
    items = items.map(lambda r: (r[1] * shards // total, r)).partitionBy(shards, lambda s: s).values()

    has_ids = id_column is not None

    def build_one(shard, rows):
        import waymark as wm

        rows = sorted(rows, key=lambda r: r[1])
        if not rows:
            return
        texts = [r[0][0] for r in rows]
        ids = [r[0][1] for r in rows] if has_ids else None
        if ids is None:
            path = wm.build_shard(texts, staging, shard, like=seed_path, first_number=rows[0][1])
        else:
            path = wm.build_shard(texts, staging, shard, like=seed_path, ids=ids)
        if on_written is not None:
            on_written(shard, path)
        yield (shard, path)

    written = sorted(items.mapPartitionsWithIndex(build_one).collect())
    numbered.unpersist()
    waymark.write_parts(index_path, [path for _, path in written])
    shutil.rmtree(staging)
    return index_path
