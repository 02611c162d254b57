"""The Spark jobs over an index in parts (local mode, two cores): bulk queries and pairs
give the answers of one ordinary index of the same items (the package on one machine) and of
the command line (`waymark pairs`, `waymark groups`), exactly in the exact modes. The data
is an invented register (tests/invented.py). pyspark comes from PyPI in the test environment
that scripts/test-data.sh makes; Spark needs Java 17 or later."""

import math
import os
import sys

import pytest

import waymark
from conftest import json_lines, run_cli
from invented import register, typo
from waymark.spark import build, groups, pairs, query

import random

# Items of the register. Spark in local mode on the shared 2-core machine spends most of
# its time in scheduling and Python workers, not in the index: the size keeps this module
# within about two minutes.
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
