"""The Spark jobs (local mode, two cores). Connected components against SciPy's
`scipy.sparse.csgraph.connected_components`, a general-purpose graph routine, as the
reference; groups against the command line's `waymark groups` on 4,000 words of Debian's
wamerican. SciPy comes with scikit-learn, and pyspark from PyPI, in the test environment that
scripts/test-data.sh makes; Spark needs Java 17 or later."""

import random

import numpy as np
import pytest
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components as scipy_components

import os
import sys

import waymark
from conftest import WORDS, json_lines, run_cli
from waymark.spark import connected_components, groups


@pytest.fixture(scope="module")
def spark():
    from pyspark.sql import SparkSession

    # Spark's Python workers must import waymark: the interpreter running the tests has it.
    os.environ["PYSPARK_PYTHON"] = sys.executable
    session = (
        SparkSession.builder.master("local[2]")
        .appName("waymark-tests")
        .config("spark.sql.shuffle.partitions", "2")
        .config("spark.ui.enabled", "false")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()


def expected(edges, n):
    """Each node's smallest fellow member, by SciPy's labels."""
    a = np.array(edges, dtype=np.int64)
    graph = coo_matrix((np.ones(len(a)), (a[:, 0], a[:, 1])), shape=(n, n))
    _, labels = scipy_components(graph, directed=False)
    nodes = sorted({x for e in edges for x in e})
    smallest = {}
    for x in nodes:
        smallest[labels[x]] = min(smallest.get(labels[x], x), x)
    return {x: smallest[labels[x]] for x in nodes}


def components_of(spark, edges, schema="src long, dst long"):
    df = spark.createDataFrame(edges, schema)
    return {r.node: r.component for r in connected_components(df).collect()}


def test_random_graphs_match_scipy(spark):
    rng = random.Random(20261203)
    # Sparse graphs below and above the giant-component threshold, with self-loops and
    # repeats, side by side in one edge list (one Spark job: its rounds are the slow part).
    edges, offset = [], 0
    for n, m in [(40, 25), (3000, 1400), (3000, 2600)]:
        edges += [(offset + rng.randrange(n), offset + rng.randrange(n)) for _ in range(m)]
        offset += n
    assert components_of(spark, edges) == expected(edges, offset)


def test_a_long_path_in_shuffled_order(spark):
    # A path is the slowest shape for label propagation; the star rounds must still end.
    rng = random.Random(5)
    order = list(range(1500))
    rng.shuffle(order)
    edges = list(zip(order, order[1:]))
    got = components_of(spark, edges)
    assert set(got.values()) == {0} and len(got) == 1500


def test_string_nodes_take_the_smallest_name(spark):
    edges = [("quay-b", "quay-a"), ("quay-c", "quay-b"), ("pier-9", "pier-9"), ("mole", "quay-c")]
    got = components_of(spark, edges, "src string, dst string")
    assert got == {
        "mole": "mole",
        "quay-a": "mole",
        "quay-b": "mole",
        "quay-c": "mole",
        "pier-9": "pier-9",
    }


def test_bad_columns_are_refused(spark):
    df = spark.createDataFrame([(1, "a")], "src long, dst string")
    with pytest.raises(ValueError, match="same type"):
        connected_components(df)
    with pytest.raises(ValueError, match="no column 'to'"):
        connected_components(df, dst="to")
    nulls = spark.createDataFrame([(1, None)], "src long, dst long")
    with pytest.raises(ValueError, match="null"):
        connected_components(nulls)


@pytest.fixture(scope="module")
def word_pairs(tmp_path_factory):
    """4,000 words of Debian's wamerican (lines 50,001 to 54,000), their index, and the
    command line's pairs within 2 (item numbers are the ids: no blank lines)."""
    folder = tmp_path_factory.mktemp("spark-words")
    words = WORDS.read_text(encoding="utf-8").splitlines()[50000:54000]
    path = folder / "words.txt"
    path.write_text("\n".join(words) + "\n", encoding="utf-8")
    index = folder / "words.wmk"
    run_cli("build", path, "-o", index, "-q")
    pairs = json_lines(run_cli("pairs", index, "--within", "2").stdout)
    assert len(pairs) > 1000
    return index, [(p["a"]["id"], p["b"]["id"], float(p["distance"])) for p in pairs]


@pytest.mark.parametrize("grouping", ["centre", "clique", "components"])
def test_groups_equal_the_command_line(spark, word_pairs, grouping):
    index, pairs = word_pairs
    want = [
        (sorted(g["ids"]), g.get("centre"))
        for g in json_lines(run_cli("groups", index, "--within", "2", "--grouping", grouping).stdout)
    ]
    # The Spark job, and the package's own function on one machine.
    df = spark.createDataFrame(pairs, "a long, b long, distance double")
    rows = groups(df, grouping=grouping).collect()
    by_group = {}
    for r in rows:
        by_group.setdefault(r.group, []).append(r.node)
    centres = {r.group: r.centre for r in rows}
    got = sorted((sorted(m), centres[g] if grouping == "centre" else None) for g, m in by_group.items())
    assert got == sorted(want)
    a, b, d = zip(*pairs)
    assert sorted(waymark.group_pairs(a, b, d, grouping=grouping)) == sorted(want)


def test_group_pairs_refuses_bad_lists():
    with pytest.raises(waymark.BadInputError, match="one length"):
        waymark.group_pairs([1, 2], [3], [1.0, 1.0])
    with pytest.raises(waymark.BadInputError, match="distance\\[1\\]"):
        waymark.group_pairs([1, 2], [3, 4], [1.0, float("nan")])
    with pytest.raises(waymark.BadInputError, match="unknown grouping"):
        waymark.group_pairs([1], [2], [1.0], grouping="chains")
