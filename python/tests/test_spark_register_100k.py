"""The Spark jobs at the size of a real register: 100,000 invented names (tests/invented.py)
built in Spark as 4 parts (local mode, two cores), then bulk queries and pairs against one
ordinary index of the same names built by the command line. Exact modes must give exactly
its answers and `waymark pairs` its pairs; approximate answers about its recall. One Spark
session and few jobs, so the module stays near a minute of the suite's time. pyspark comes
from PyPI in the test environment that scripts/test-data.sh makes."""

import os
import random
import sys

import pytest

import waymark
from conftest import json_lines, run_cli
from invented import register, typo

N = 100_000
SHARDS = 4

pytestmark = pytest.mark.skipif(
    not hasattr(waymark, "build_shard"), reason="the package has no sharded build (waymark.build_shard)"
)


@pytest.fixture(scope="module")
def spark():
    from pyspark.sql import SparkSession

    os.environ["PYSPARK_PYTHON"] = sys.executable
    session = (
        SparkSession.builder.master("local[2]")
        .appName("waymark-register-100k")
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
    return register(N, seed=23)


@pytest.fixture(scope="module")
def whole(tmp_path_factory, names):
    """One ordinary index of every name, by the command line (ids: line numbers from 0)."""
    folder = tmp_path_factory.mktemp("register-whole")
    text = folder / "names.txt"
    text.write_text("\n".join(names) + "\n", encoding="utf-8")
    path = folder / "whole.wmk"
    run_cli("build", text, "-o", path, "-q")
    return path


@pytest.fixture(scope="module")
def sharded(spark, tmp_path_factory, names):
    from waymark.spark import build

    folder = tmp_path_factory.mktemp("register-sharded")
    # No id column: ids are the names' numbers from 0, as the command line numbers lines.
    df = spark.createDataFrame([(t,) for t in names], "name string")
    return build(spark, df, "name", folder / "names.wmk", shards=SHARDS, sample=4000)


@pytest.fixture(scope="module")
def lookups(names):
    rng = random.Random(29)
    return [typo(rng, rng.choice(names), rng.choice([1, 2, 3])) for _ in range(600)]


def spark_answers(df):
    out = {}
    for r in df.collect():
        out.setdefault(r.query_id, []).append((r.rank, r.neighbour_id, r.item, r.distance))
    return {q: [x[1:] for x in sorted(v)] for q, v in out.items()}


def test_the_parts_hold_every_name_once(sharded):
    parts = waymark.list_parts(sharded)
    assert len(parts) == SHARDS
    assert sum(p["items"] for p in parts) == N


def test_pairs_in_spark_equal_the_command_line(spark, sharded, whole):
    from waymark.spark import pairs

    found = sorted((r.id_a, r.id_b, r.distance) for r in pairs(spark, sharded, within=2).collect())
    cli = json_lines(run_cli("pairs", whole, "--within", "2").stdout)
    want = sorted((p["a"]["id"], p["b"]["id"], float(p["distance"])) for p in cli)
    # The register repeats a fifth of its names with typos: many pairs, not a handful.
    assert len(want) > N // 2
    assert found == want


def test_exact_and_approximate_queries_in_spark(spark, sharded, whole, lookups):
    from waymark.spark import query

    df = spark.createDataFrame([(t,) for t in lookups], "name string")
    one = waymark.open(whole)
    want = {q: one.query(t, 10, exact=True) for q, t in enumerate(lookups)}
    got = spark_answers(query(spark, sharded, df, "name", k=10, exact=True))
    assert got == want

    # Threshold recall@10 (answers within the true 10th distance; ties count) of the
    # approximate answers: the parts in Spark against the one index on one machine.
    def recall(found):
        hits = sum(sum(1 for a in found.get(q, []) if a[-1] <= t[-1][-1]) for q, t in want.items())
        return hits / sum(len(t) for t in want.values())

    approx = spark_answers(query(spark, sharded, df, "name", k=10))
    alone = {q: one.query(t, 10) for q, t in enumerate(lookups)}
    print(f"recall@10 at {N} names: parts in Spark {recall(approx):.4f}, one index {recall(alone):.4f}")
    assert recall(approx) >= recall(alone) - 0.03
