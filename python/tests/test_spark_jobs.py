"""The Spark jobs over an index in parts (local mode, two cores): bulk queries and pairs
give the answers of one ordinary index of the same items (the package on one machine) and of
the command line (`waymark pairs`, `waymark groups`), exactly in the exact modes. The data
is an invented register (tests/invented.py). pyspark comes from PyPI in the test environment
that scripts/test-data.sh makes; Spark needs Java 17 or later."""

import math
import os
import shutil
import subprocess
import sys
import time

import pytest

import waymark
from conftest import json_lines, run_cli
from invented import register, typo
from waymark.spark import build, groups, pairs, query

import random

# Items of the register. Spark in local mode on the shared 2-core machine spends most of
# its time in scheduling and Python workers, not in the index: the size keeps this module's
# many small jobs within about three minutes (test_spark_register_100k.py runs a few jobs
# over 100,000 names).
N = 30_000
SHARDS = 3


@pytest.fixture(scope="module")
def spark():
    from pyspark.sql import SparkSession

    # Spark's Python workers must import waymark: the interpreter running the tests has it.
    os.environ["PYSPARK_PYTHON"] = sys.executable
    session = (
        # local[2,2]: two threads, and a failed task runs again once (the retry test).
        SparkSession.builder.master("local[2,2]")
        .appName("waymark-jobs-tests")
        .config("spark.sql.shuffle.partitions", "2")
        .config("spark.ui.enabled", "false")
        .config("spark.ui.showConsoleProgress", "false")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()


@pytest.fixture(scope="module")
def names():
    return register(N)


@pytest.fixture(scope="module")
def whole(tmp_path_factory, names):
    """One ordinary index of every name, by the command line (ids: line numbers from 0)."""
    folder = tmp_path_factory.mktemp("jobs-whole")
    text = folder / "names.txt"
    text.write_text("\n".join(names) + "\n", encoding="utf-8")
    path = folder / "whole.wmk"
    run_cli("build", text, "-o", path, "-q")
    return path


@pytest.fixture(scope="module")
def slices(tmp_path_factory, names):
    """The names as ordinary index files of consecutive slices, each with its own
    references, ids continuing across the slices."""
    folder = tmp_path_factory.mktemp("jobs-slices")
    paths, step = [], -(-len(names) // SHARDS)
    for s, start in enumerate(range(0, len(names), step)):
        chunk = names[start : start + step]
        path = folder / f"slice-{s}.wmk"
        waymark.build(chunk, path, ids=list(range(start, start + len(chunk))))
        paths.append(str(path))
    return paths


@pytest.fixture(scope="module")
def lookups(names):
    rng = random.Random(11)
    return [typo(rng, rng.choice(names), rng.choice([1, 2, 3])) for _ in range(400)]


def spark_answers(df):
    out = {}
    for r in df.collect():
        out.setdefault(r.query_id, []).append((r.rank, r.neighbour_id, r.item, r.distance))
    return {q: [x[1:] for x in sorted(v)] for q, v in out.items()}


def one_index_answers(index, lookups, **kw):
    return {q: [a for a in index.query(text, **kw)] for q, text in enumerate(lookups)}


@pytest.fixture(scope="module")
def queries_df(spark, lookups):
    return spark.createDataFrame([(t,) for t in lookups], "name string")


def test_exact_bulk_queries_equal_one_index(spark, whole, slices, queries_df, lookups):
    got = spark_answers(query(spark, slices, queries_df, "name", k=5, exact=True))
    want = one_index_answers(waymark.open(whole), lookups, k=5, exact=True)
    assert got == want


def test_range_bulk_queries_equal_one_index(spark, whole, slices, queries_df, lookups):
    got = spark_answers(query(spark, slices, queries_df, "name", k=None, within=2))
    want = one_index_answers(waymark.open(whole), lookups, within=2)
    assert {q: v for q, v in want.items() if v} == got
    assert sum(map(len, got.values())) > len(lookups) // 2


def test_approximate_recall_is_about_one_index(spark, whole, slices, queries_df, lookups):
    index = waymark.open(whole)
    truth = one_index_answers(index, lookups, k=10, exact=True)
    one = one_index_answers(index, lookups, k=10)
    got = spark_answers(query(spark, slices, queries_df, "name", k=10))

    def recall(found):
        # Threshold recall@10: answers within the true 10th distance (ties count).
        hits = sum(sum(1 for a in found.get(q, []) if a[-1] <= t[-1][-1]) for q, t in truth.items())
        return hits / sum(len(t) for t in truth.values())

    print(f"recall@10: parts in Spark {recall(got):.4f}, one index {recall(one):.4f}")
    assert recall(got) >= recall(one) - 0.03


@pytest.fixture(scope="module")
def cli_pairs(whole):
    out = json_lines(run_cli("pairs", whole, "--within", "2").stdout)
    assert len(out) > 1000
    return out


def test_pairs_equal_the_command_line(spark, slices, cli_pairs):
    got = sorted((r.id_a, r.id_b, r.distance) for r in pairs(spark, slices, within=2).collect())
    want = sorted((p["a"]["id"], p["b"]["id"], float(p["distance"])) for p in cli_pairs)
    assert got == want


def test_groups_of_the_pairs_equal_the_command_line(spark, whole, slices):
    want = sorted(sorted(g["ids"]) for g in json_lines(run_cli("groups", whole, "--within", "1").stdout))
    found = pairs(spark, slices, within=1)
    rows = groups(found, "number_a", "number_b").collect()
    by_group = {}
    for r in rows:
        by_group.setdefault(r.group, []).append(r.node)
    assert sorted(sorted(m) for m in by_group.values()) == want


def test_refusals(spark, slices, queries_df):
    with pytest.raises(ValueError, match="no column 'title'"):
        query(spark, slices, queries_df, "title")
    for bad in (-1, math.nan, math.inf, "2"):
        with pytest.raises(ValueError, match="within must be"):
            query(spark, slices, queries_df, "name", within=bad)
        with pytest.raises(ValueError, match="within must be"):
            pairs(spark, slices, within=bad)
    with pytest.raises(ValueError, match="give within"):
        query(spark, slices, queries_df, "name", k=None)
    with pytest.raises(ValueError, match="no such index"):
        pairs(spark, "/nonexistent/x.wmk", within=1)
    numbers = spark.createDataFrame([(1,)], "name long")
    with pytest.raises(ValueError, match="must be strings"):
        query(spark, slices, numbers, "name")


needs_shards = pytest.mark.skipif(
    not hasattr(waymark, "build_shard"), reason="the package has no sharded build (waymark.build_shard)"
)


@pytest.fixture(scope="module")
def sharded(spark, tmp_path_factory, names):
    """The names built in Spark as an index in parts, one part per shard."""
    if not hasattr(waymark, "build_shard"):
        pytest.skip("the package has no sharded build (waymark.build_shard)")
    folder = tmp_path_factory.mktemp("jobs-sharded")
    df = spark.createDataFrame([(t,) for t in names], "name string")
    path = build(spark, df, "name", folder / "names.wmk", shards=SHARDS, sample=2000)
    return path


@needs_shards
def test_a_sharded_build_answers_as_one_index(spark, sharded, whole, queries_df, lookups, cli_pairs):
    parts = waymark.list_parts(sharded)
    assert [p["items"] for p in parts] == [N // SHARDS] * SHARDS
    assert [p["first"] for p in parts] == [s * (N // SHARDS) for s in range(SHARDS)]
    got = spark_answers(query(spark, sharded, queries_df, "name", k=5, exact=True))
    assert got == one_index_answers(waymark.open(whole), lookups, k=5, exact=True)
    found = sorted((r.id_a, r.id_b, r.distance) for r in pairs(spark, sharded, within=2).collect())
    assert found == sorted((p["a"]["id"], p["b"]["id"], float(p["distance"])) for p in cli_pairs)


@needs_shards
def test_removed_items_are_skipped(spark, sharded, whole, tmp_path, queries_df, lookups):
    # Remove (by the command line) the exact nearest neighbour of the first 50 queries.
    nearest = spark_answers(query(spark, sharded, queries_df, "name", k=1, exact=True))
    gone = {nearest[q][0][0] for q in range(50) if q in nearest}
    ids = tmp_path / "gone.txt"
    ids.write_text("".join(f"{i}\n" for i in sorted(gone)))
    shutil.copytree(os.path.dirname(sharded), tmp_path / "copy")
    index = str(tmp_path / "copy" / os.path.basename(sharded))
    run_cli("remove", index, "--ids", ids)
    assert sum(len(p["removed"]) for p in waymark.list_parts(index)) == len(gone)

    # One index of every name, the removed ids left out of its answers and pairs.
    one = waymark.open(whole)
    want = {}
    for q, t in enumerate(lookups):
        kept = [a for a in one.query(t, 3 + len(gone), exact=True) if a[0] not in gone][:3]
        want[q] = kept
    got = spark_answers(query(spark, index, queries_df, "name", k=3, exact=True))
    assert got == {q: v for q, v in want.items() if v}
    found = sorted((r.id_a, r.id_b, r.distance) for r in pairs(spark, index, within=1).collect())
    cli = json_lines(run_cli("pairs", whole, "--within", "1").stdout)
    assert found == sorted(
        (p["a"]["id"], p["b"]["id"], float(p["distance"]))
        for p in cli
        if p["a"]["id"] not in gone and p["b"]["id"] not in gone
    )


@needs_shards
def test_a_failed_first_attempt_leaves_a_correct_index(spark, tmp_path, names, whole, queries_df, lookups):
    def fail_first(shard, path):
        from pyspark import TaskContext

        # After the part is written: the retry writes it again, under the same name.
        if shard == 1 and TaskContext.get().attemptNumber() == 0:
            raise RuntimeError("a first attempt that fails after writing its part")

    df = spark.createDataFrame([(t,) for t in names], "name string")
    path = build(spark, df, "name", tmp_path / "retried.wmk", shards=SHARDS, sample=2000, on_written=fail_first)
    parts = waymark.list_parts(path)
    assert len(parts) == SHARDS and sum(p["items"] for p in parts) == N
    files = sorted(os.listdir(tmp_path / "retried.wmk.parts"))
    assert len(files) == SHARDS, files
    assert not os.path.exists(tmp_path / "retried.wmk.shards")
    got = spark_answers(query(spark, path, queries_df, "name", k=5, exact=True))
    assert got == one_index_answers(waymark.open(whole), lookups, k=5, exact=True)


@needs_shards
def test_a_failed_build_leaves_nothing_behind(spark, tmp_path):
    # 300 invented names, one of them (item 250, in the last of 3 shards) with a NUL byte; the
    # seed's sample of 20 does not draw it, so the seed is built and the last shard's task
    # refuses it, after the other two tasks have written their parts.
    names = register(300)
    names[250] = names[250][:3] + "\0" + names[250][3:]
    df = spark.createDataFrame([(t,) for t in names], "name string")
    folder = tmp_path / "register"
    folder.mkdir()
    (folder / "names.txt").write_text("kept\n")
    log = tmp_path / "written.log"

    def note(shard, path):
        with open(log, "a") as f:
            f.write(path + "\n")

    with pytest.raises(waymark.BadInputError, match=r"^build: shard 2: item 250: the item contains a NUL byte$"):
        build(spark, df, "name", folder / "names.wmk", shards=3, sample=20, on_written=note)
    written = log.read_text().split()
    assert len(written) == 2 and all(p.startswith(str(folder / "names.wmk.shards") + os.sep) for p in written)
    assert os.listdir(folder) == ["names.txt"] and (folder / "names.txt").read_text() == "kept\n"

    # An error in a task (on_written, on every attempt of shard 0) while the other task is
    # still at work: it writes into the staging folder a second after shard 0 has failed
    # for good, as a part written late would. Spark's error, once that task has stopped,
    # and nothing left (without the wait for it, the late file stays).
    staging = str(folder / "names.wmk.shards")

    def fail(shard, path):
        if shard == 0:
            raise RuntimeError("a part that cannot be kept")
        time.sleep(1)
        os.makedirs(staging, exist_ok=True)
        with open(os.path.join(staging, "late.wmk"), "w") as f:
            f.write("late\n")

    good = spark.createDataFrame([(t,) for t in register(300)], "name string")
    with pytest.raises(Exception, match="a part that cannot be kept"):
        build(spark, good, "name", folder / "names.wmk", shards=2, sample=20, on_written=fail)
    time.sleep(2)
    assert os.listdir(folder) == ["names.txt"]

    # A staging folder that was there before: only what the build added to it is removed.
    (folder / "names.wmk.shards").mkdir()
    (folder / "names.wmk.shards" / "notes.txt").write_text("kept\n")
    with pytest.raises(waymark.BadInputError, match=r"^build: shard 2: item 250: "):
        build(spark, df, "name", folder / "names.wmk", shards=3, sample=20)
    assert sorted(os.listdir(folder)) == ["names.txt", "names.wmk.shards"]
    assert os.listdir(folder / "names.wmk.shards") == ["notes.txt"]


def test_build_refusals(spark, tmp_path):
    df = spark.createDataFrame([("Orvane Quay", 1), (None, 2)], "name string, code long")
    with pytest.raises(ValueError, match="no column 'title'"):
        build(spark, df, "title", tmp_path / "x.wmk")
    with pytest.raises(ValueError, match="items must be strings"):
        build(spark, df, "code", tmp_path / "x.wmk")
    with pytest.raises(ValueError, match="null in 'name'"):
        build(spark, df, "name", tmp_path / "x.wmk", "code")
    with pytest.raises(ValueError, match="shards must be"):
        build(spark, df, "name", tmp_path / "x.wmk", shards=0)
    with pytest.raises(ValueError, match=r"seed must be a whole number from 0 to 2\*\*64 - 1, not -1"):
        build(spark, df, "name", tmp_path / "x.wmk", seed=-1)
    ok = spark.createDataFrame([("Orvane Quay", 1), ("Keth Landing", 2)], "name string, code long")
    with pytest.raises(ValueError, match="^dim must be a positive integer, got -3"):
        build(spark, ok, "name", tmp_path / "x.wmk", dim=-3)
    assert not os.path.exists(tmp_path / "x.wmk")
    assert not os.path.exists(tmp_path / "x.wmk.shards")


def spark_cli(*args, cwd=None):
    env = dict(os.environ, PYSPARK_PYTHON=sys.executable)
    return subprocess.run(
        [sys.executable, "-m", "waymark.spark", *map(str, args)], capture_output=True, text=True, env=env, cwd=cwd
    )


def test_the_entry_point_refuses_bad_arguments_and_input(tmp_path, whole):
    (tmp_path / "taken").mkdir()
    out = spark_cli("pairs", "--index", whole, "--within", "2", "--out", tmp_path / "taken")
    assert out.returncode == 2 and "the output folder exists" in out.stderr
    assert os.listdir(tmp_path / "taken") == []
    out = spark_cli("pairs", "--index", whole, "--within", "-1", "--out", tmp_path / "p")
    assert out.returncode == 2 and "a radius is a finite number of at least 0" in out.stderr
    out = spark_cli("query", "--index", whole, "--input", tmp_path / "none.csv", "--column", "name", "--out", tmp_path / "q")
    assert out.returncode == 2 and "none.csv: no such file" in out.stderr
    # Refused once Spark has read the file: a column it does not have.
    csv = tmp_path / "lookups.csv"
    csv.write_text("code,name\n1,Orvane Quay\n")
    out = spark_cli("query", "--index", whole, "--input", csv, "--column", "title", "--master", "local[1]", "--out", tmp_path / "q")
    assert out.returncode == 2 and "no column 'title'" in out.stderr, out.stderr[-2000:]
    assert not (tmp_path / "q").exists()
