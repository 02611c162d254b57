"""A sharded build in Spark: references chosen once on the driver, one part per partition
built on the executors, the list file written last."""

from __future__ import annotations

import functools
import os
import re
import shutil
import time
import uuid

from pyspark.sql import DataFrame, SparkSession
from pyspark.sql import functions as F
from pyspark.sql.types import IntegralType, StringType

# Items drawn on the driver for the seed (the references are chosen among them).
SAMPLE = 4096

# How long a failed build waits for the tasks Spark is stopping before it cleans up.
STOP_WAIT = 60.0


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

    A build that fails (an item a part refuses, a task that fails on every attempt, an
    interruption) removes what it wrote: the staging folder, or, when that folder was
    there before the call, only the files this call added to it; ``INDEX.parts/`` too when
    this call made it and no list was written. Nothing that was there before is removed.
    An item refused by its part (the seed's metric cannot take it, a NUL byte) is refused
    as the build's error, of the class ``waymark`` raised, naming the shard and the item's
    number (and its id), without the task being run again.

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

    drawn = items.takeSample(False, min(sample, total), seed)
    has_ids = id_column is not None
    # The seed and the shards are written to a staging folder beside the index; write_parts
    # links the shards into INDEX.parts/ and writes the list, and the folder is then removed.
    # What was there before this call is left alone: the clean-up, after success or
    # failure, removes only what this call made.
    staging = index_path + ".shards"
    parts_folder = index_path + ".parts"
    staged_before = set(os.listdir(staging)) if os.path.isdir(staging) else None
    parts_before = os.path.lexists(parts_folder)
    list_before = _identity(index_path)
    os.makedirs(staging, exist_ok=True)
    # A name of this call's own, so that no file of an earlier run is written over.
    seed_path = os.path.join(staging, f"seed-{uuid.uuid4().hex[:16]}.wmk")

    def build_one(shard, rows):
        import waymark as wm

        rows = sorted(rows, key=lambda r: r[1])
        if not rows:
            return
        texts = [r[0][0] for r in rows]
        ids = [r[0][1] for r in rows] if has_ids else None
        try:
            if ids is None:
                path = wm.build_shard(texts, staging, shard, like=seed_path, first_number=rows[0][1])
            else:
                path = wm.build_shard(texts, staging, shard, like=seed_path, ids=ids)
        except wm.WaymarkError as err:
            # Refused items are refused again on every attempt: reported to the driver,
            # which fails the build, rather than failing the task for Spark to run again.
            yield (shard, None, type(err).__name__, _name_the_item(str(err), rows, has_ids))
            return
        if on_written is not None:
            on_written(shard, path)
        yield (shard, path, None, None)

    try:
        # total: the seed stores the default candidates of an index of every item.
        try:
            waymark.build_seed([r[0][0] for r in drawn], seed_path, total=total, seed=seed, **options)
        except waymark.WaymarkError as err:
            named = _name_the_item(str(err), drawn, has_ids)
            if named == str(err):
                raise
            raise type(err)(f"build: {named}") from None

        # Consecutive runs of item numbers, one per shard, none empty: the same on every attempt.
        if shards is None:
            shards = min(df.rdd.getNumPartitions(), 1024)
        shards = min(shards, total)
        runs = items.map(lambda r: (r[1] * shards // total, r)).partitionBy(shards, lambda s: s).values()
        written = sorted(_collect(spark.sparkContext, runs.mapPartitionsWithIndex(build_one)))
        refused = [w for w in written if w[1] is None]
        if refused:
            shard, _, kind, message = refused[0]
            cls = getattr(waymark, kind, None)
            if not (isinstance(cls, type) and issubclass(cls, waymark.WaymarkError)):
                cls = waymark.BadInputError
            raise cls(f"build: shard {shard}: {message}")
        waymark.write_parts(index_path, [w[1] for w in written])
    except BaseException as err:
        left = _remove_made(staging, staged_before)
        # write_parts makes INDEX.parts/ before it writes the list, which it writes last:
        # made by this call, and the list not written, it names nothing.
        if not parts_before and _identity(index_path) == list_before and os.path.isdir(parts_folder):
            shutil.rmtree(parts_folder, ignore_errors=True)
            if os.path.lexists(parts_folder):
                left.append(parts_folder)
        if left and hasattr(err, "add_note"):
            err.add_note(f"build: could not remove what this build wrote: {', '.join(left)}")
        try:
            numbered.unpersist()
        except Exception:  # the build's own error is the one raised
            pass
        raise
    numbered.unpersist()
    left = _remove_made(staging, staged_before)
    if left:
        raise OSError(f"build: the index is written, but the staging files {', '.join(left)} could not be removed")
    return index_path


# A message of waymark about the K-th (from 1) of the items it was given.
_ITEM = re.compile(r"items:(\d+): (.*)", re.S)


def _name_the_item(message: str, rows, has_ids: bool) -> str:
    """``message``, a refusal of the K-th of the items given to ``waymark`` (``items:K:``),
    with the item named by its number across the build (and its id), ``rows`` being the
    ``((item, id?), number)`` rows given in order; other messages as they are."""
    m = _ITEM.fullmatch(message)
    if not m or not 1 <= int(m.group(1)) <= len(rows):
        return message
    (values, number) = rows[int(m.group(1)) - 1]
    which = f"item {number} (id {values[1]!r})" if has_ids else f"item {number}"
    return f"{which}: {m.group(2)}"


def _identity(path: str):
    """What tells whether the file at ``path`` was replaced: device, inode, size and
    modification time, or None when there is none."""
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return None
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns)


def _collect(sc, rdd):
    """``rdd.collect()`` in a job group of its own. When it fails (a task failed on every
    attempt, or the caller was interrupted), the job is cancelled and its running tasks
    waited for: Spark stops them without waiting (a Python worker is killed after
    ``spark.python.task.killTimeout``), and a task still running could write a part after
    the clean-up."""
    group = f"waymark-build-{uuid.uuid4().hex}"
    old = sc.getLocalProperty("spark.jobGroup.id")
    sc.setLocalProperty("spark.jobGroup.id", group)
    try:
        return rdd.collect()
    except BaseException:
        try:
            sc.cancelJobGroup(group)
            _wait_for_tasks(sc, group)
        except Exception:  # the clean-up goes on; the job's own error is the one raised
            pass
        raise
    finally:
        try:
            sc.setLocalProperty("spark.jobGroup.id", old)
        except Exception:  # a context that is gone: nothing to restore
            pass


def _wait_for_tasks(sc, group: str, limit: float = STOP_WAIT) -> None:
    """Waits until no task of the jobs of ``group`` runs, at most ``limit`` seconds."""
    tracker = sc.statusTracker()
    end = time.monotonic() + limit
    while time.monotonic() < end:
        running = 0
        for job in tracker.getJobIdsForGroup(group):
            info = tracker.getJobInfo(job)
            for stage in info.stageIds if info is not None else ():
                stage_info = tracker.getStageInfo(stage)
                running += stage_info.numActiveTasks if stage_info is not None else 0
        if running == 0:
            return
        time.sleep(0.1)


def _remove_made(folder: str, before: set[str] | None) -> list[str]:
    """Removes what this build made in the staging ``folder``: all of it when the build made
    it (``before`` is None), else the entries that were not in ``before``. Returns what
    could not be removed (a writer that Spark had not stopped yet may add a file while the
    folder is removed: it is tried again)."""
    for attempt in range(5):
        if attempt:
            time.sleep(0.2)
        if before is None:
            shutil.rmtree(folder, ignore_errors=True)
            left = [folder] if os.path.lexists(folder) else []
        else:
            try:
                made = sorted(set(os.listdir(folder)) - before)
            except FileNotFoundError:
                return []
            for name in made:
                path = os.path.join(folder, name)
                if os.path.isdir(path) and not os.path.islink(path):
                    shutil.rmtree(path, ignore_errors=True)
                else:
                    try:
                        os.remove(path)
                    except FileNotFoundError:
                        pass
            left = [os.path.join(folder, n) for n in made if os.path.lexists(os.path.join(folder, n))]
        if not left:
            return []
    return left
