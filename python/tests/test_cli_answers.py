"""The package gives the command line's answers on the demo register (demo-data/register.csv,
the invented postal register of Vessmark, and its 500 misspelt look-ups)."""

import csv

import numpy as np
import pytest

import waymark
from conftest import DEMO, json_lines, run_cli


def cli_answers(index_path, *args):
    out = run_cli("query", index_path, *args, "--queries", DEMO / "lookups.txt")
    return [[(n["id"], n["item"], n["distance"]) for n in a["neighbors"]] for a in json_lines(out.stdout)]


def test_build_file_writes_the_same_bytes_as_the_command_line(cli_register, register):
    assert open(cli_register, "rb").read() == open(register.path, "rb").read()


@pytest.mark.parametrize(
    "cli_args, kwargs",
    [
        (["-k", "3"], dict(k=3)),
        (["-k", "5", "--candidates", "40"], dict(k=5, candidates=40)),
        (["-k", "5", "--exact"], dict(k=5, exact=True)),
        (["--within", "2"], dict(within=2.0)),
        (["--within-fraction", "0.15"], dict(within_fraction=0.15)),
        (["-k", "5", "--widen", "2"], dict(k=5, widen=2)),
        (["-k", "3", "--space", "l2", "--candidates-from", "tree"], dict(k=3, space="l2", candidates_from="tree")),
    ],
)
def test_one_query_at_a_time_answers_as_the_command_line(cli_register, register, lookups, cli_args, kwargs):
    want = cli_answers(cli_register, *cli_args)
    got = [register.query(q, **kwargs) for q in lookups]
    assert got == want


@pytest.mark.parametrize(
    "cli_args, kwargs",
    [
        (["-k", "3"], dict(k=3)),
        (["-k", "10", "--exact"], dict(k=10, exact=True)),
        (["-k", "6", "--within", "3"], dict(k=6, within=3.0)),
        (["-k", "6", "--within-fraction", "0.2"], dict(k=6, within_fraction=0.2)),
        # The curve is weighed by the lengths of the queries answered together: all 500
        # look-ups here, one block of the command line's.
        (["-k", "4", "--recall", "0.9"], dict(k=4, recall=0.9)),
    ],
)
def test_many_queries_answer_as_the_command_line(cli_register, register, lookups, cli_args, kwargs):
    want = cli_answers(cli_register, *cli_args)
    numbers, distances = register.query_many(lookups, **kwargs)
    k = kwargs["k"]
    assert numbers.shape == distances.shape == (len(lookups), k)
    assert numbers.dtype == np.int64 and distances.dtype == np.float64
    ids, items = register.ids(numbers), register.items(numbers)
    for w, row_n, row_d, row_i, row_t in zip(want, numbers, distances, ids, items):
        got = [(i, t, d) for n, i, t, d in zip(row_n, row_i, row_t, row_d) if n != -1]
        assert got == w
        # Fill values after the answers, none before.
        assert all(n == -1 and d == np.inf for n, d in zip(row_n[len(w):], row_d[len(w):]))


def test_a_list_of_items_with_ids_gives_the_command_lines_answers(cli_register, register_dir, lookups):
    with open(DEMO / "register.csv", encoding="utf-8", newline="") as f:
        rows = list(csv.DictReader(f))
    index = waymark.build(
        [r["name"] for r in rows], register_dir / "py-list.wmk", ids=[r["code"] for r in rows]
    )
    assert len(index) == len(rows) == 30000
    assert index.query(lookups[2], k=2) == cli_answers(cli_register, "-k", "2")[2]
    for args, kwargs in [(["-k", "3"], dict(k=3)), (["-k", "3", "--exact"], dict(k=3, exact=True))]:
        want = cli_answers(cli_register, *args)
        assert [index.query(q, **kwargs) for q in lookups] == want


def test_the_readme_example_answer(register):
    # README, "Worked example": the misspelt lane is one edit from TE-00382, and the next
    # nearest is the landing five edits away (the default char counts find it; an exact
    # query agrees).
    want = [
        ("TE-00382", "Deirnkvérsjør Lane", 1.0),
        ("OR-27149", "Deirnkvérsjør Landing", 5.0),
    ]
    assert register.query("Deirnkvérejør Lane", k=2) == want
    assert register.query("Deirnkvérejør Lane", k=2, exact=True) == want


def test_inspect_is_the_command_lines_json(cli_register, register):
    import json

    want = json.loads(run_cli("inspect", cli_register, "--json").stdout)
    got = register.inspect()
    # The same file content: only the path differs.
    want.pop("path"), got.pop("path")
    assert got == want
    assert register.inspect(verify=True)["verified"] is True


def test_eval_rows_match_the_command_lines_recall(cli_register, register, lookups):
    import json

    out = run_cli("eval", cli_register, "--queries", DEMO / "lookups.txt", "-k", "10",
                  "--candidates", "50,250", "--json", "--no-cache")
    want = json.loads(out.stdout)["recall"]
    got = register.eval(lookups, 10, candidates=[50, 250])
    assert got["queries"] == 500 and got["k"] == 10
    for g, w in zip(got["recall"], want):
        for key in ["candidates", "recall", "plain_recall", "distances_per_query", "share_of_items"]:
            assert g[key] == w[key], key
    asked = register.eval(lookups, 10, recall=[0.9])["recall"][0]
    assert asked["asked_recall"] == 0.9 and 0 < asked["expected_recall"] <= 1


def test_distortion_matches_the_command_lines(cli_register, register):
    import json

    out = run_cli("eval", cli_register, "--distortion", "--pairs", "2000", "--json")
    want = json.loads(out.stdout)["distortion"]
    assert register.distortion(pairs=2000) == want
