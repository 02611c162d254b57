"""Vectors from a numpy array against a general-purpose reference library: scikit-learn's
`NearestNeighbors(algorithm="brute")` on its bundled handwritten digits
(`sklearn.datasets.load_digits`, 1,797 images of 8×8 pixels, shipped inside the
scikit-learn package on PyPI)."""

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.metrics import pairwise_distances
from sklearn.neighbors import NearestNeighbors

import waymark

K = 10


@pytest.fixture(scope="module")
def digits():
    x = load_digits().data.astype(np.float32)
    return x[:1597], x[1597:]


@pytest.mark.parametrize("metric, sk_metric", [("l2", "euclidean"), ("l1", "manhattan"), ("linf", "chebyshev")])
def test_exact_answers_equal_scikit_learns_brute_force(tmp_path, digits, metric, sk_metric):
    items, queries = digits
    index = waymark.build(items, tmp_path / "digits.wmk", metric=metric, dim=16)
    assert len(index) == 1597 and index.metric == metric
    numbers, distances = index.query_many(queries, K, exact=True)
    reference = NearestNeighbors(n_neighbors=K, algorithm="brute", metric=sk_metric).fit(items)
    want_d, want_i = reference.kneighbors(queries)
    np.testing.assert_allclose(distances, want_d, rtol=1e-6, atol=1e-6)
    # Items: equal wherever no other item of the set is at the same distance.
    every = pairwise_distances(queries, items, metric=sk_metric)
    unique = 0
    for row_n, row_wi, row_wd, row_all in zip(numbers, want_i, want_d, every):
        for j in range(K):
            if np.sum(np.isclose(row_all, row_wd[j], rtol=1e-9, atol=1e-9)) == 1:
                assert row_n[j] == row_wi[j]
                unique += 1
    assert unique >= 100
    # One query as a 1-D array, a list or a float64 array: the same answer.
    first = index.query(queries[0], K, exact=True)
    assert [d for _, _, d in first] == pytest.approx(list(want_d[0]), rel=1e-6)
    assert index.query(list(map(float, queries[0])), K, exact=True) == first
    assert index.query(queries[0].astype(np.float64), K, exact=True) == first


def test_approximate_recall_at_d16_with_100_candidates(tmp_path, digits):
    # The README's figure on this set: threshold recall@10 0.971 with 100 candidates.
    items, queries = digits
    index = waymark.build(items, tmp_path / "digits.wmk", metric="l2", dim=16)
    numbers, distances = index.query_many(queries, K, candidates=100)
    want_d, _ = NearestNeighbors(n_neighbors=K, algorithm="brute").fit(items).kneighbors(queries)
    kth = want_d[:, -1:] + 1e-3
    recall = float(np.mean(np.sum(distances <= kth, axis=1) / K))
    assert recall >= 0.95, recall
    # The distances returned are true distances of the items returned.
    for q, row_n, row_d in zip(queries[:20], numbers, distances):
        true = np.sqrt(((items[row_n].astype(np.float64) - q) ** 2).sum(axis=1))
        np.testing.assert_allclose(row_d, true, rtol=1e-6)


def test_within_r_is_every_vector_within_r(tmp_path, digits):
    items, queries = digits
    index = waymark.build(items, tmp_path / "digits.wmk", metric="l2", dim=16)
    radius = 20.0
    reference = NearestNeighbors(algorithm="brute").fit(items)
    want_d, want_i = reference.radius_neighbors(queries[:30], radius=radius, sort_results=True)
    for q, wd, wi in zip(queries[:30], want_d, want_i):
        got = index.query(q, within=radius)
        assert sorted(n for n, _, _ in got) == sorted(wi.tolist())
        assert [d for _, _, d in got] == pytest.approx(list(wd), rel=1e-6)


def test_the_items_are_the_rows_and_ids_their_positions(tmp_path, digits):
    items, _ = digits
    index = waymark.build(items[:50], tmp_path / "few.wmk", dim=4, ids=[1000 + i for i in range(50)])
    assert index.id(7) == 1007
    assert [float(x) for x in index.item(7).split(",")] == list(items[7])
    numbers, _ = index.query_many(items[:3], 1, exact=True)
    assert index.ids(numbers) == [[1000], [1001], [1002]]
