"""A distance written in Python, on a small set: the quays of an invented harbour, as
numbers along the waterfront (distance: how far apart two berths are) and as names under a
plain Python Levenshtein. Every answer is checked against a brute force over the same
function."""

import pytest

import waymark
from test_exact import levenshtein

BERTHS = [f"{n}" for n in range(0, 400, 3)]


def quay(query, items):
    """Berths along the quay: the distance is the difference of their numbers."""
    q = int(query)
    return [abs(q - int(x)) for x in items]


def names(query, items):
    return [levenshtein(query, x) for x in items]


def brute(items, fn, q):
    return sorted((d, i) for i, d in enumerate(fn(q, items)))


def test_build_query_and_reopen_with_a_python_distance(tmp_path):
    path = tmp_path / "quay.wmk"
    index = waymark.build(BERTHS, path, metric=quay, integral=True, dim=4)
    assert index.metric == "quay" and index.python_metric
    for q in ["0", "100", "101", "250", "399", "1000"]:
        want = brute(BERTHS, quay, q)
        got = index.query(q, 3, exact=True)
        assert [(i, d) for i, _, d in got] == [(i, float(d)) for d, i in want[:3]]
        within = index.query(q, within=7)
        assert [(i, d) for i, _, d in within] == [(i, float(d)) for d, i in want if d <= 7]
        approx = index.query(q, 3)
        assert all(d == abs(int(q) - int(item)) for _, item, d in approx)
    numbers, distances = index.query_many(["5", "77"], 2, exact=True)
    assert distances.tolist() == [[1.0, 2.0], [1.0, 2.0]]
    assert index.items(numbers) == [["6", "3"], ["78", "75"]]
    # Opened again with the same function; refused without it or with another name.
    again = waymark.open(path, metric=quay, integral=True)
    assert again.query("200", 1, exact=True) == index.query("200", 1, exact=True)
    with pytest.raises(waymark.CorruptIndexError, match="built with the distance `quay` written in Python"):
        waymark.open(path)
    with pytest.raises(waymark.CorruptIndexError, match="not `names`"):
        waymark.open(path, metric=names)


def test_a_python_levenshtein_gives_the_built_in_metrics_exact_answers(tmp_path):
    words = ["Orvane Quay", "Orvane Strand", "Keth Landing", "Mirrow Steps", "Keth Landings",
             "Brindle Holme", "Skerrow Pier", "Vessa Slip", "Tuha Wynd", "Orvane Quays"]
    py = waymark.build(words, tmp_path / "py.wmk", metric=names, integral=True, dim=3)
    built_in = waymark.build(words, tmp_path / "lev.wmk", dim=3)
    for q in ["Orvane Qay", "Keth", "Vesa Slip", ""]:
        assert py.query(q, 4, exact=True) == built_in.query(q, 4, exact=True)
        assert py.query(q, within=3) == built_in.query(q, within=3)


def test_a_function_that_raises_or_returns_nonsense_is_a_metric_failure(tmp_path):
    def fails_on_keth(query, items):
        if query == "Kethra":
            raise ValueError("no Kethra here")
        return names(query, items)

    index = waymark.build(["Orvane Quay", "Keth Landing", "Vessa Slip"], tmp_path / "a.wmk",
                          metric=fails_on_keth, dim=2, calibrate=False)
    assert index.query("Keth Landin", 1, exact=True) == [(1, "Keth Landing", 1.0)]
    with pytest.raises(waymark.MetricFailedError, match="fails_on_keth.*raised.*no Kethra here"):
        index.query("Kethra", 1, exact=True)
    # The failure stays: the metric is not trusted again until the index is opened anew.
    with pytest.raises(waymark.MetricFailedError):
        index.query("Keth Landin", 1)

    def too_many(query, items):
        return [0.0] * (len(items) + 1)

    with pytest.raises(waymark.MetricFailedError, match=r"returned \d+ distances for \d+ items"):
        waymark.build(["a", "bb", "ccc"], tmp_path / "b.wmk", metric=too_many, dim=2)
    assert not (tmp_path / "b.wmk").exists()

    def negative(query, items):
        return [-1.0 for _ in items]

    with pytest.raises(waymark.MetricFailedError, match="a distance is a finite number"):
        waymark.build(["a", "bb", "ccc"], tmp_path / "c.wmk", metric=negative, dim=2)

    def not_numbers(query, items):
        return "far"

    with pytest.raises(waymark.MetricFailedError, match="not a sequence of numbers"):
        waymark.build(["a", "bb", "ccc"], tmp_path / "d.wmk", metric=not_numbers, dim=2)
    assert not (tmp_path / "d.wmk").exists()


def test_a_function_that_is_not_a_metric_is_warned_of(tmp_path):
    def squared(query, items):
        return [levenshtein(query, x) ** 2 for x in items]

    with pytest.warns(UserWarning, match="breaks the metric rules"):
        waymark.build(["Keth", "Kath", "Katt", "Matt", "Mott"], tmp_path / "s.wmk", metric=squared, dim=2)


def test_numpy_results_are_taken(tmp_path):
    np = pytest.importorskip("numpy")

    def quay_np(query, items):
        return np.abs(int(query) - np.array([int(x) for x in items], dtype=np.float64))

    index = waymark.build(BERTHS, tmp_path / "q.wmk", metric=quay_np, dim=4)
    assert index.query("100", 1, exact=True) == [(33, "99", 1.0)]
