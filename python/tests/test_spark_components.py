"""Connected components in Spark (local mode, two cores) against SciPy's
`scipy.sparse.csgraph.connected_components`, a general-purpose graph routine, as the
reference. SciPy comes with scikit-learn, and pyspark from PyPI, in the test environment that
scripts/test-data.sh makes; Spark needs Java 17 or later."""

import random

import numpy as np
import pytest
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components as scipy_components

from waymark.spark import connected_components


@pytest.fixture(scope="module")
def spark():
    from pyspark.sql import SparkSession

    session = (
        SparkSession.builder.master("local[2]")
        .appName("waymark-tests")
        .config("spark.sql.shuffle.partitions", "4")
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
    # Sparse graphs below and above the giant-component threshold, with self-loops and repeats.
    for n, m in [(40, 25), (3000, 1400), (3000, 2600)]:
        edges = [(rng.randrange(n), rng.randrange(n)) for _ in range(m)]
        assert components_of(spark, edges) == expected(edges, n)


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
