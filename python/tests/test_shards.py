"""Sharded indexes from Python: build_seed, build_shard, write_parts, list_parts, and open()
of a list file, checked against the command line (`waymark build --shards`, `add`,
`remove`, `compact`) and against brute force with the Wagner-Fischer edit distance (common
practice), on Debian's american-english word list (wamerican)."""

import os
from pathlib import Path

import numpy as np
import pytest

import waymark
from conftest import json_lines, run_cli, word_list


def levenshtein(a: str, b: str) -> int:
    """The Wagner-Fischer dynamic programme over code points."""
    prev = list(range(len(b) + 1))
    for i, ca in enumerate(a, 1):
        cur = [i]
        for j, cb in enumerate(b, 1):
            cur.append(min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (ca != cb)))
        prev = cur
    return prev[-1]


def words(n, skip=0):
    return word_list()[skip::7][:n]


def queries(n):
    # Indexed words are every 7th from the first; these are others, one letter doubled.
    out = []
    for w in word_list()[3::7][::11][:n]:
        at = len(w) // 2
        out.append(w[:at] + w[at:at + 1] + w[at:])
    return out


def cli_answers(index_path, qs, *args):
    out = run_cli("query", index_path, *args, stdin="\n".join(qs))
    return [[(n["id"], n["item"], n["distance"]) for n in a["neighbors"]] for a in json_lines(out.stdout)]


def sharded_from_python(tmp_path, items, shards, seed=0, folder="shards", dim=16):
    """The seed (from a sample of 1000), the shards with their record numbers, the list."""
    rng = np.random.default_rng(seed)
    sample = [items[i] for i in sorted(rng.choice(len(items), 1000, replace=False))]
    seed_path = tmp_path / f"seed{seed}.wmk"
    waymark.build_seed(sample, seed_path, total=len(items), dim=dim, seed=seed)
    bounds = np.linspace(0, len(items), shards + 1).astype(int)
    paths = []
    for s in range(shards):
        lo, hi = bounds[s], bounds[s + 1]
        paths.append(
            waymark.build_shard(items[lo:hi], tmp_path / folder, s, like=seed_path, first_number=int(lo))
        )
    return seed_path, paths


MODES = [
    (["-k", "5", "--exact"], dict(k=5, exact=True)),
    (["--within", "2"], dict(within=2.0)),
    (["-k", "6", "--within-fraction", "0.2"], dict(k=6, within_fraction=0.2)),
]


@pytest.mark.parametrize("cli_args, kwargs", MODES)
def test_a_sharded_build_from_python_answers_as_build_shards_in_exact_modes(tmp_path, cli_args, kwargs):
    items = words(4000)
    qs = queries(60)
    _, paths = sharded_from_python(tmp_path, items, 3)
    index_path = tmp_path / "py.wmk"
    assert waymark.write_parts(index_path, paths) is None
    (tmp_path / "words.txt").write_text("\n".join(items) + "\n", encoding="utf-8")
    cli_path = tmp_path / "cli.wmk"
    run_cli("build", tmp_path / "words.txt", "-o", cli_path, "--dim", "16", "--shards", "3", "-q")
    want = cli_answers(cli_path, qs, *cli_args)
    index = waymark.open(index_path)
    assert len(index) == len(items)
    got = [index.query(q, **kwargs) for q in qs]
    assert got == want
    numbers, distances = index.query_many(qs, **{"k": 10, **kwargs})
    for w, row_n, row_d, row_i in zip(want, numbers, distances, index.ids(numbers)):
        assert [(i, index.item(int(n)), d) for n, i, d in zip(row_n, row_i, row_d) if n != -1] == w[:10]
    # And brute force: the exact k nearest by distance.
    if kwargs.get("exact"):
        for q, answer in zip(qs, got):
            true = sorted(levenshtein(q, w) for w in items)[:5]
            assert [d for _, _, d in answer] == true
            assert all(items[i] == t and levenshtein(q, t) == d for i, t, d in answer)


def test_parts_are_listed_with_their_first_numbers_and_the_seed_is_not_a_part(tmp_path):
    items = words(3000)
    seed_path, paths = sharded_from_python(tmp_path, items, 3)
    waymark.write_parts(tmp_path / "w.wmk", list(reversed(paths)))
    listed = waymark.list_parts(tmp_path / "w.wmk")
    assert [p["items"] for p in listed] == [1000, 1000, 1000]
    assert [p["first"] for p in listed] == [0, 1000, 2000]
    assert [p["removed"] for p in listed] == [[], [], []]
    assert [Path(p["path"]).name for p in listed] == [Path(p).name for p in paths]
    assert all(Path(p["path"]).parent == tmp_path / "w.wmk.parts" for p in listed)
    index = waymark.open(tmp_path / "w.wmk")
    assert index.id(1500) == 1500 and index.item(2999) == items[2999]
    assert index.inspect()["format"] == "parts"
    assert len(index.inspect(verify=True)["parts"]) == 3
    # A whole file lists as itself.
    assert waymark.list_parts(seed_path) == [dict(path=str(seed_path), items=1000, removed=[], first=0)]
    with pytest.raises(waymark.BadInputError, match="compact it"):
        index.eval(queries(5), k=3, candidates=[50])


def test_a_shard_written_twice_leaves_one_file(tmp_path):
    items = words(1500)
    seed_path, paths = sharded_from_python(tmp_path, items, 2)
    again = waymark.build_shard(items[750:], tmp_path / "shards", 1, like=seed_path, first_number=750)
    assert again == paths[1]
    assert sorted(os.listdir(tmp_path / "shards")) == sorted(Path(p).name for p in paths)
    with pytest.raises(waymark.BadInputError, match="first_number"):
        waymark.build_shard(items[:10], tmp_path / "shards", 0, like=seed_path)
    with pytest.raises(waymark.BadInputError, match=r"shard number 1024 is out of range \(0 to 1023\)"):
        waymark.build_shard(items[:10], tmp_path / "shards", 1024, like=seed_path, first_number=0)


def test_a_shard_of_another_seed_is_refused_by_write_parts(tmp_path):
    items = words(1500)
    _, paths = sharded_from_python(tmp_path, items, 2, seed=1, folder="a")
    _, other = sharded_from_python(tmp_path, items, 2, seed=2, folder="b")
    with pytest.raises(waymark.BadInputError, match="shard 1: its embedding .* is not shard 0's"):
        waymark.write_parts(tmp_path / "w.wmk", [paths[0], other[1]])
    with pytest.raises(waymark.BadInputError, match="shard 1 is missing"):
        waymark.write_parts(tmp_path / "w.wmk", [paths[0]] + [p.replace("00001", "00002") for p in other[1:]])
    assert not (tmp_path / "w.wmk").exists()


@pytest.mark.parametrize("kwargs", [dict(k=5, exact=True), dict(within=2.0), dict(k=4, within_fraction=0.2)])
def test_open_of_a_grown_index_answers_like_the_compacted_one(tmp_path, kwargs):
    base, more = words(2000), words(600, skip=1)
    (tmp_path / "base.txt").write_text("\n".join(base) + "\n", encoding="utf-8")
    (tmp_path / "more.txt").write_text("\n".join(more) + "\n", encoding="utf-8")
    (tmp_path / "gone.txt").write_text("0\n7\n2100\n", encoding="utf-8")
    idx = tmp_path / "grown.wmk"
    run_cli("build", tmp_path / "base.txt", "-o", idx, "--dim", "12", "-q")
    run_cli("add", idx, tmp_path / "more.txt")
    run_cli("remove", idx, "--ids", tmp_path / "gone.txt")
    qs = queries(40)
    grown = waymark.open(idx)
    assert len(grown) == 2600 - 3
    listed = waymark.list_parts(idx)
    assert sum(len(p["removed"]) for p in listed) == 3
    removed = [p["first"] + r for p in listed for r in p["removed"]]
    with pytest.raises(IndexError, match="removed"):
        grown.item(removed[0])
    before = [grown.query(q, **kwargs) for q in qs]
    numbers, _ = grown.query_many(qs, **{"k": 10, **kwargs})
    many = [[t for n, t in zip(row, names) if n != -1] for row, names in zip(numbers, grown.items(numbers))]
    del grown
    run_cli("compact", idx)
    compacted = waymark.open(idx)
    assert len(compacted) == 2600 - 3
    after = [compacted.query(q, **kwargs) for q in qs]
    assert before == after
    numbers, _ = compacted.query_many(qs, **{"k": 10, **kwargs})
    assert many == [[t for n, t in zip(row, names) if n != -1] for row, names in zip(numbers, compacted.items(numbers))]
