"""Exact and range answers equal a brute force outside the project: a plain Python dynamic
program for Levenshtein distance over Unicode characters (the textbook Wagner–Fischer
recurrence), on Debian's wamerican list and on the demo register."""

import random

import pytest

import waymark
from conftest import word_list


def levenshtein(a: str, b: str) -> int:
    prev = list(range(len(b) + 1))
    for i, ca in enumerate(a, 1):
        cur = [i]
        for j, cb in enumerate(b, 1):
            cur.append(min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (ca != cb)))
        prev = cur
    return prev[-1]


def typo(word: str, rng: random.Random) -> str:
    letters = "abcdefghijklmnopqrstuvwxyz"
    i = rng.randrange(len(word) + 1)
    op = rng.choice("isd")
    if op == "i":
        return word[:i] + rng.choice(letters) + word[i:]
    if op == "s" and i < len(word):
        return word[:i] + rng.choice(letters) + word[i + 1:]
    return word[:i] + word[i + 1:] if i < len(word) else word + "e"


@pytest.fixture(scope="module")
def words():
    rng = random.Random(7)
    return rng.sample(word_list(), 3000)


@pytest.fixture(scope="module")
def queries(words):
    rng = random.Random(8)
    return [typo(w, rng) for w in rng.sample(words, 25)] + ["", "zzzzzzzzzzzzzzzzzzzz"]


@pytest.fixture(scope="module")
def index(words, tmp_path_factory):
    return waymark.build(words, tmp_path_factory.mktemp("words") / "words.wmk", dim=16)


def brute(words, q):
    return sorted((levenshtein(q, w), i) for i, w in enumerate(words))


def test_exact_k_nearest_equal_the_dynamic_program(index, words, queries):
    for q in queries:
        truth = brute(words, q)
        got = index.query(q, 10, exact=True)
        assert [d for _, _, d in got] == [float(d) for d, _ in truth[:10]], q
        # Ties at the same distance come out by id (here the position): the brute force's order.
        assert [i for i, _, _ in got] == [i for _, i in truth[:10]], q
        assert [t for _, t, _ in got] == [words[i] for _, i in truth[:10]]


def test_within_r_equals_the_dynamic_program(index, words, queries):
    for q in queries[:12]:
        for r in (1, 2):
            want = [(i, float(d)) for d, i in brute(words, q) if d <= r]
            assert [(i, d) for i, _, d in index.query(q, within=r)] == want


def test_many_exact_queries_equal_the_dynamic_program(index, words, queries):
    numbers, distances = index.query_many(queries, 5, exact=True)
    for q, row_n, row_d in zip(queries, numbers, distances):
        truth = brute(words, q)[:5]
        assert row_d.tolist() == [float(d) for d, _ in truth]
        assert row_n.tolist() == [i for _, i in truth]


def test_approximate_distances_are_true_distances(index, words, queries):
    for q in queries:
        for i, item, d in index.query(q, 5):
            assert item == words[i] and d == levenshtein(q, item)
