"""Index.pairs_within: the pairs of one index (the self-join of `waymark pairs --within`)
and the pairs across two indexes, which together give the pairs of one index of all the
items. Checked against the command line and against a plain dynamic-programming edit
distance computed here over all pairs. The data is an invented register (tests/invented.py)."""

import numpy as np
import pytest

import waymark
from conftest import json_lines, run_cli
from invented import register

N = 700
CUT = 320
# The widest radius checked: distances above it are not needed.
WIDEST = 6


def edit_distance(a: str, b: str, cap: int | None = None) -> int:
    """Levenshtein distance by the textbook dynamic programme (Wagner-Fischer), one row at
    a time; with ``cap``, any value above it once a whole row is above it (the distance is
    at least the smallest value of each row)."""
    prev = list(range(len(b) + 1))
    for i, ca in enumerate(a, 1):
        cur = [i]
        for j, cb in enumerate(b, 1):
            cur.append(min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (ca != cb)))
        prev = cur
        if cap is not None and min(prev) > cap:
            return cap + 1
    return prev[-1]


def test_the_reference_distance_gives_the_published_example():
    # kitten -> sitting: 3 edits, the worked example of the Levenshtein distance article on
    # Wikipedia (and of most texts on edit distance).
    assert edit_distance("kitten", "sitting") == 3
    assert edit_distance("", "abc") == 3


@pytest.fixture(scope="module")
def names():
    return register(N, seed=19)


@pytest.fixture(scope="module")
def indexes(tmp_path_factory, names):
    """The names as one index, and as two: the first CUT names (with a deletion-variant
    table of radius 2) and the rest (without one)."""
    folder = tmp_path_factory.mktemp("pairs-within")
    whole = folder / "whole.txt"
    whole.write_text("\n".join(names) + "\n", encoding="utf-8")
    run_cli("build", whole, "-o", folder / "whole.wmk", "-q")
    waymark.build(names[:CUT], folder / "first.wmk", small_radius=2)
    waymark.build(names[CUT:], folder / "second.wmk")
    return {k: waymark.open(folder / f"{k}.wmk") for k in ("whole", "first", "second")}


def triples(a, b, d, shift_a=0, shift_b=0):
    assert a.dtype == np.int64 and b.dtype == np.int64 and d.dtype == np.float64
    assert len(a) == len(b) == len(d)
    return [(int(x) + shift_a, int(y) + shift_b, float(z)) for x, y, z in zip(a, b, d)]


@pytest.fixture(scope="module")
def distances(names):
    """Every pair (i < j) of the names within WIDEST, by the plain edit distance."""
    out = {}
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            # Lengths first: the distance is at least their difference.
            if abs(len(names[i]) - len(names[j])) <= WIDEST:
                d = edit_distance(names[i], names[j], cap=WIDEST)
                if d <= WIDEST:
                    out[(i, j)] = float(d)
    return out


def brute_force(distances, within):
    return sorted((i, j, d) for (i, j), d in distances.items() if d <= within)


def test_pairs_of_one_index_are_those_of_the_command_line(indexes):
    whole = indexes["whole"]
    got = triples(*whole.pairs_within(2))
    assert all(a < b for a, b, _ in got)
    cli = json_lines(run_cli("pairs", whole.path, "--within", "2").stdout)
    want = sorted((p["a"]["id"], p["b"]["id"], float(p["distance"])) for p in cli)
    assert sorted(got) == want
    assert len(want) > 20


@pytest.mark.parametrize("within", [1, 2, 3])
def test_pairs_of_two_indexes_and_across_are_those_of_all_items(indexes, distances, within):
    # Radii 1 and 2 go through the first index's table; 3 through range queries.
    first, second = indexes["first"], indexes["second"]
    across = triples(*first.pairs_within(within, other=second), shift_b=CUT)
    got = sorted(
        triples(*first.pairs_within(within))
        + triples(*second.pairs_within(within), shift_a=CUT, shift_b=CUT)
        + across
    )
    assert got == brute_force(distances, within)
    assert len(across) > 5
    # Asked the other way round: the same pairs across.
    back = triples(*second.pairs_within(within, other=first), shift_a=CUT)
    assert sorted((b, a, d) for a, b, d in back) == sorted(across)


def test_a_fraction_of_the_length(indexes, names, distances):
    first, second = indexes["first"], indexes["second"]
    got = sorted(
        triples(*first.pairs_within(within_fraction=0.1))
        + triples(*second.pairs_within(within_fraction=0.1), shift_a=CUT, shift_b=CUT)
        + triples(*first.pairs_within(within_fraction=0.1, other=second), shift_b=CUT)
    )
    want = [
        (a, b, d)
        for a, b, d in brute_force(distances, WIDEST)
        if d <= 0.1 * max(len(names[a]), len(names[b]))
    ]
    assert got == want and got


def test_refusals(indexes, tmp_path):
    first = indexes["first"]
    with pytest.raises(waymark.BadInputError, match="one of within"):
        first.pairs_within()
    with pytest.raises(waymark.BadInputError, match="one of within"):
        first.pairs_within(1, within_fraction=0.1)
    with pytest.raises(waymark.BadInputError, match="radius"):
        first.pairs_within(-1)
    folded = tmp_path / "folded.wmk"
    waymark.build(["Harbour Row", "harbour row"], folded, fold_case=True)
    with pytest.raises(waymark.BadInputError, match="same metric and normalisation"):
        first.pairs_within(1, other=waymark.open(folded))
