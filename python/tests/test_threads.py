"""One index shared by threads: every thread gets the answers of a query asked alone."""

from concurrent.futures import ThreadPoolExecutor

import numpy as np

import waymark
from test_python_metric import BERTHS, quay


def test_threads_querying_one_index_get_the_single_threaded_answers(register, lookups):
    queries = lookups[:120]
    want_approx = [register.query(q, 5) for q in queries]
    want_exact = [register.query(q, 3, exact=True) for q in queries]
    want_many = register.query_many(queries, 4)

    def work(t):
        got = []
        for j, q in enumerate(queries):
            if (j + t) % 2:
                got.append(("approx", j, register.query(q, 5)))
            else:
                got.append(("exact", j, register.query(q, 3, exact=True)))
        return got, register.query_many(queries, 4)

    with ThreadPoolExecutor(max_workers=8) as pool:
        results = list(pool.map(work, range(16)))
    for got, (numbers, distances) in results:
        for kind, j, answer in got:
            assert answer == (want_approx[j] if kind == "approx" else want_exact[j])
        np.testing.assert_array_equal(numbers, want_many[0])
        np.testing.assert_array_equal(distances, want_many[1])


def test_threads_share_an_index_with_a_python_distance(tmp_path):
    index = waymark.build(BERTHS, tmp_path / "quay.wmk", metric=quay, integral=True, dim=4)
    queries = [str(n) for n in range(0, 400, 7)]
    want = [index.query(q, 2, exact=True) for q in queries]
    with ThreadPoolExecutor(max_workers=6) as pool:
        got = list(pool.map(lambda q: index.query(q, 2, exact=True), queries * 4))
    assert got == want * 4
    numbers, _ = index.query_many(queries, 2, exact=True)
    assert index.items(numbers) == [[t for _, t, _ in w] for w in want]
