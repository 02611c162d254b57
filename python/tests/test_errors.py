"""Bad input raises the library's error, as an exception of its class (the rows of the
contributor guide's bad-input table that apply to the package), and never leaves a
half-written index."""

import os
import subprocess

import numpy as np
import pytest

import waymark
from conftest import DEMO, waymark_bin
from test_exact import levenshtein

NAMES = ["Orvane Quay", "Orvane Strand", "Keth Landing", "Mirrow Steps"]


def test_the_exceptions_have_one_base_class():
    for cls in (waymark.BadInputError, waymark.CorruptIndexError, waymark.MetricFailedError):
        assert issubclass(cls, waymark.WaymarkError) and issubclass(cls, Exception)


def test_empty_input_is_refused_and_writes_nothing(tmp_path):
    for items in ([], ["", ""]):
        with pytest.raises(waymark.BadInputError, match="no items in items"):
            waymark.build(items, tmp_path / "e.wmk")
    with pytest.raises(waymark.BadInputError, match="no items in items .2 blank records skipped"):
        waymark.build(["  ", "\t"], tmp_path / "e.wmk", trim=True)
    (tmp_path / "empty.txt").write_text("")
    with pytest.raises(waymark.BadInputError, match="no items in"):
        waymark.build_file(tmp_path / "empty.txt", tmp_path / "e.wmk")
    assert os.listdir(tmp_path) == ["empty.txt"]


def test_a_single_item_and_identical_items(tmp_path):
    one = waymark.build(["Keth"], tmp_path / "one.wmk")
    assert one.query("Vessa", 5) == [(0, "Keth", float(levenshtein("Vessa", "Keth")))]
    same = waymark.build(["Vessa"] * 4, tmp_path / "same.wmk", ids=["d", "c", "b", "a"])
    assert same.query("Vesa", 10) == [(i, "Vessa", 1.0) for i in ["a", "b", "c", "d"]]
    assert same.inspect()["meta"]["dim"] == 1


def test_nul_bytes_name_the_item(tmp_path):
    with pytest.raises(waymark.BadInputError, match=r"items:2: the item contains a NUL byte"):
        waymark.build(["Keth", "Ka\0th"], tmp_path / "n.wmk")
    assert not (tmp_path / "n.wmk").exists()


def test_k_larger_than_n_returns_every_item(tmp_path):
    index = waymark.build(NAMES, tmp_path / "k.wmk")
    assert len(index.query("Keth", 100)) == 4
    assert len(index.query("Keth", 100, exact=True)) == 4
    numbers, distances = index.query_many(["Keth"], 6)
    assert sorted(numbers[0, :4].tolist()) == [0, 1, 2, 3]
    assert numbers[0, 4:].tolist() == [-1, -1] and np.isinf(distances[0, 4:]).all()


@pytest.mark.parametrize("dim", [0, 65])
def test_a_dimension_out_of_range(tmp_path, dim):
    with pytest.raises(waymark.BadInputError, match="dim must be between 1 and 64"):
        waymark.build(NAMES, tmp_path / "d.wmk", dim=dim)


def test_bad_option_values_name_the_option(tmp_path):
    with pytest.raises(waymark.BadInputError, match="metric `levenstein`"):
        waymark.build(NAMES, tmp_path / "m.wmk", metric="levenstein")
    with pytest.raises(waymark.BadInputError, match="sample must be at least 1"):
        waymark.build(NAMES, tmp_path / "m.wmk", landmark_sample=0)
    with pytest.raises(waymark.BadInputError, match="candidates must be at least 1"):
        waymark.build(NAMES, tmp_path / "m.wmk", candidates=0)
    with pytest.raises(waymark.BadInputError, match="qgrams must be at least 1"):
        waymark.build(NAMES, tmp_path / "m.wmk", metric="jaccard", qgrams=0)
    with pytest.raises(waymark.BadInputError, match="needs --costs"):
        waymark.build(NAMES, tmp_path / "m.wmk", metric="weighted")
    with pytest.raises(waymark.BadInputError, match="space `l3`"):
        waymark.build(NAMES, tmp_path / "m.wmk", space="l3")
    assert not (tmp_path / "m.wmk").exists()


def test_a_malformed_side_file_is_bad_input_with_its_line(tmp_path):
    costs = tmp_path / "costs.txt"
    costs.write_text("indel * 1.5\nsub A G cheap\n")
    with pytest.raises(waymark.BadInputError, match=r"costs\.txt:2:"):
        waymark.build(NAMES, tmp_path / "w.wmk", metric="weighted", costs=costs)
    edges = tmp_path / "legs.txt"
    edges.write_text("Vessa-Holbre Vessa-Kvikvi 10\nVessa-Tuha Vessa-Holbre\n")
    with pytest.raises(waymark.BadInputError, match=r"legs\.txt:2:"):
        waymark.build_file(edges, tmp_path / "g.wmk", metric="graph", dim=4)
    assert not (tmp_path / "w.wmk").exists()
    assert not (tmp_path / "g.wmk").exists()


def test_an_empty_query_and_a_query_longer_than_every_item(tmp_path):
    index = waymark.build(NAMES, tmp_path / "q.wmk")
    # The empty string's distance to an item is the item's length.
    assert index.query("", 1, exact=True) == [(0, "Orvane Quay", 11.0)]
    long = "Orvane Quay" * 20
    assert index.query(long, 1, exact=True)[0][:2] == (0, "Orvane Quay")


def test_missing_or_unreadable_input_names_the_path(tmp_path):
    with pytest.raises(waymark.BadInputError, match="nowhere.txt"):
        waymark.build_file(tmp_path / "nowhere.txt", tmp_path / "o.wmk")
    with pytest.raises(waymark.BadInputError, match=str(tmp_path)):
        waymark.build_file(tmp_path, tmp_path / "o.wmk")


def test_output_in_a_missing_folder_or_over_its_input(tmp_path):
    with pytest.raises(waymark.BadInputError, match="the output folder does not exist"):
        waymark.build(NAMES, tmp_path / "missing" / "o.wmk")
    src = tmp_path / "names.txt"
    src.write_text("\n".join(NAMES) + "\n")
    with pytest.raises(waymark.BadInputError, match="the output is the input"):
        waymark.build_file(src, src)
    assert src.read_text() == "\n".join(NAMES) + "\n"


def test_queries_the_metric_cannot_take(tmp_path):
    vectors = waymark.build(np.eye(4, dtype=np.float32), tmp_path / "v.wmk", dim=2)
    with pytest.raises(waymark.BadInputError, match="the query has 3 components; the index's vectors have 4"):
        vectors.query([1.0, 0.0, 0.0])
    with pytest.raises(waymark.BadInputError, match=r"queries\[1\]: the query has 2 components"):
        vectors.query_many([[1, 0, 0, 0], [1, 0]], 1)
    with pytest.raises(waymark.BadInputError, match="column 2: NaN is not allowed"):
        vectors.query([1.0, float("nan"), 0.0, 0.0])
    codes = waymark.build(["ACGTAC", "ACGTTT", "GGGTAC"], tmp_path / "h.wmk", metric="hamming")
    with pytest.raises(waymark.BadInputError, match="Hamming distance needs the items' length, 6"):
        codes.query("ACG")
    ferries = waymark.build_file(DEMO / "ferries.txt", tmp_path / "f.wmk", metric="graph", dim=4)
    with pytest.raises(waymark.BadInputError, match="is not a node of the graph"):
        ferries.query("Atlantis", 1)
    with pytest.raises(waymark.BadInputError, match="a query is a string"):
        ferries.query(12, 1)


def test_vectors_with_nan_or_infinity_name_row_and_column(tmp_path):
    x = np.ones((5, 3), dtype=np.float32)
    x[3, 1] = np.nan
    with pytest.raises(waymark.BadInputError, match="items:4: row 4, column 2: NaN is not allowed"):
        waymark.build(x, tmp_path / "v.wmk")
    x[3, 1] = np.inf
    with pytest.raises(waymark.BadInputError, match="row 4, column 2: infinity is not allowed"):
        waymark.build(x, tmp_path / "v.wmk")
    with pytest.raises(waymark.BadInputError, match="dtype float32"):
        waymark.build(np.ones((5, 3)), tmp_path / "v.wmk")
    with pytest.raises(waymark.BadInputError, match="metric must be l1, l2, linf or angular"):
        waymark.build(np.ones((5, 3), dtype=np.float32), tmp_path / "v.wmk", metric="levenshtein")
    assert not (tmp_path / "v.wmk").exists()


def test_ids_that_are_not_one_per_item_or_not_one_type(tmp_path):
    with pytest.raises(waymark.BadInputError, match="a corpus of 4 items was given 3 ids"):
        waymark.build(NAMES, tmp_path / "i.wmk", ids=[1, 2, 3])
    with pytest.raises(waymark.BadInputError, match="ids must be a list of integers or a list of strings"):
        waymark.build(NAMES, tmp_path / "i.wmk", ids=[1, "b", 3, 4])


def test_bad_query_options(tmp_path):
    index = waymark.build(NAMES, tmp_path / "o.wmk")
    with pytest.raises(waymark.BadInputError, match="k must be at least 1"):
        index.query("Keth", 0)
    with pytest.raises(waymark.BadInputError, match="radius must be a finite distance of at least 0, not -1"):
        index.query("Keth", within=-1)
    with pytest.raises(waymark.BadInputError, match="not NaN"):
        index.query("Keth", within=float("nan"))
    for r in (0.0, 1.0, 1.5, -0.2, float("nan")):
        with pytest.raises(waymark.BadInputError, match="recall must be a number strictly between 0 and 1"):
            index.query("Keth", 3, recall=r)
    with pytest.raises(waymark.BadInputError, match="does not combine"):
        index.query("Keth", 3, recall=0.9, candidates=10)
    with pytest.raises(waymark.BadInputError, match="do not take"):
        index.query("Keth", 3, exact=True, candidates=10)
    # As on the command line: a visit budget only counts with cells.
    for source in ("scan", "tree", "counts"):
        with pytest.raises(waymark.BadInputError, match=f'candidates_from="{source}" compares no cells'):
            index.query("Keth", 3, candidates_from=source, visit=8)
        with pytest.raises(waymark.BadInputError, match="would ignore it"):
            index.query_many(["Keth"], 3, candidates_from=source, visit=8)
    # The char counts answer plain Levenshtein only; on it they are the default.
    assert index.query("Keth", 3, candidates_from="counts") == index.query("Keth", 3)
    tokens = waymark.build(NAMES, tmp_path / "t.wmk", metric="jaccard")
    with pytest.raises(waymark.BadInputError, match="applies to plain Levenshtein indexes only"):
        tokens.query("Keth", 3, candidates_from="counts")
    with pytest.raises(waymark.BadInputError, match="not one of cells, scan, tree, counts"):
        index.query("Keth", 3, candidates_from="grid")
    with pytest.raises(waymark.BadInputError, match="do not combine"):
        index.query("Keth", within=1, within_fraction=0.2)
    with pytest.raises(waymark.BadInputError, match="do not take"):
        index.query("Keth", within_fraction=0.2, widen=1)
    with pytest.raises(waymark.BadInputError, match="fraction"):
        index.query("Keth", within_fraction=-0.5)
    with pytest.raises(waymark.BadInputError, match="fraction"):
        index.query_many(["Keth"], 2, within_fraction=float("nan"))


def test_negative_and_absurd_integer_arguments_name_the_argument(tmp_path):
    index = waymark.build(NAMES, tmp_path / "n.wmk")
    refused = [
        ("k must be a positive integer, got -1", lambda: index.query("Keth", -1)),
        ("k must be a positive integer, got -5", lambda: index.query_many(["Keth"], k=-5)),
        ("k must be a positive integer, got -1", lambda: index.eval(["Keth"], k=-1)),
        ("candidates must be a positive integer, got -3", lambda: index.query("Keth", 2, candidates=-3)),
        ("candidates must be a positive integer, got -3", lambda: index.eval(["Keth"], 2, candidates=[5, -3])),
        ("visit must be an integer of at least 0, got -2", lambda: index.query_many(["Keth"], 2, visit=-2)),
        ("widen must be an integer of at least 0, got -1", lambda: index.query("Keth", 2, widen=-1)),
        ("pairs must be an integer of at least 0, got -10", lambda: index.distortion(pairs=-10)),
        ("dim must be a positive integer, got -2", lambda: waymark.build(NAMES, tmp_path / "x.wmk", dim=-2)),
        ("pool must be an integer of at least 0, got -1", lambda: waymark.build(NAMES, tmp_path / "x.wmk", pool=-1)),
        ("seed must be an integer of at least 0, got -7", lambda: waymark.build(NAMES, tmp_path / "x.wmk", seed=-7)),
        ("landmark_sample must be a positive integer, got -1",
         lambda: waymark.build(NAMES, tmp_path / "x.wmk", landmark_sample=-1)),
        ("small_radius must be an integer of at least 0, got -1",
         lambda: waymark.build(NAMES, tmp_path / "x.wmk", small_radius=-1)),
        ("qgrams must be a positive integer, got -2",
         lambda: waymark.build(NAMES, tmp_path / "x.wmk", metric="jaccard", qgrams=-2)),
        ("candidates must be a positive integer, got -1",
         lambda: waymark.build_file(DEMO / "ferries.txt", tmp_path / "x.wmk", candidates=-1)),
        ("shard must be an integer of at least 0, got -1",
         lambda: waymark.build_shard(NAMES, tmp_path, -1, like=index.path, first_number=0)),
        ("first_number must be an integer of at least 0, got -4",
         lambda: waymark.build_shard(NAMES, tmp_path, 0, like=index.path, first_number=-4)),
        # Too large for any count: refused before any work, naming the limit.
        ("k must be at most 18446744073709551615, got 10000000000000000000000000000000000000000",
         lambda: index.query("Keth", 10**40)),
        ("k must be a positive integer, got -1000000000000000000000000000000000000000000",
         lambda: index.query("Keth", -(10**42))),
        ("widen must be at most 4294967295, got 4294967296", lambda: index.query("Keth", 2, widen=2**32)),
        ("seed must be at most 18446744073709551615, got 18446744073709551616",
         lambda: waymark.build(NAMES, tmp_path / "x.wmk", seed=2**64)),
    ]
    for message, call in refused:
        with pytest.raises(waymark.BadArgumentError) as err:
            call()
        assert str(err.value) == message
        # Both a ValueError, as Python's own functions raise, and one of waymark's errors.
        assert isinstance(err.value, ValueError) and isinstance(err.value, waymark.BadInputError)
    assert not (tmp_path / "x.wmk").exists()
    assert sorted(os.listdir(tmp_path)) == ["n.wmk"]
    # Zero is refused as the command line refuses `-k 0` (same message), and the largest
    # count is a count: k beyond the index's size gives every item.
    with pytest.raises(waymark.BadInputError, match="^k must be at least 1$"):
        index.query("Keth", 0)
    assert len(index.query("Keth", 2**64 - 1)) == len(NAMES)
    # query_many's answer arrays are n × k whatever is found: past memory, refused.
    for queries, k in ((["Keth"], 2**64 - 1), (["Keth", "Orvane"], 2**63)):
        with pytest.raises(waymark.BadArgumentError, match="more than memory holds; give a smaller k"):
            index.query_many(queries, k)
    # An item number beyond any integer type is not in the index, like any other.
    with pytest.raises(IndexError, match="item number 10000000000000000000000 is not in the index"):
        index.item(10**22)
    # Not an integer at all: Python's TypeError, naming the argument.
    with pytest.raises(TypeError, match="'float' object cannot be interpreted as an integer"):
        index.query("Keth", 2.5)


def test_k_zero_is_refused_as_the_command_line_refuses_it(tmp_path):
    index = waymark.build(NAMES, tmp_path / "z.wmk")
    (tmp_path / "q.txt").write_text("Keth\n")
    cli = subprocess.run(
        [str(waymark_bin()), "query", str(tmp_path / "z.wmk"), "--queries", str(tmp_path / "q.txt"), "-k", "0"],
        capture_output=True, text=True,
    )
    assert cli.returncode == 2 and cli.stderr.strip() == "waymark: error: -k must be at least 1"
    with pytest.raises(waymark.BadInputError) as err:
        index.query("Keth", 0)
    assert str(err.value) == cli.stderr.strip().removeprefix("waymark: error: -")


def test_recall_on_an_index_without_a_curve_is_refused_with_advice(tmp_path):
    index = waymark.build(NAMES, tmp_path / "n.wmk", calibrate=False)
    with pytest.raises(waymark.BadInputError, match="carries no recall calibration"):
        index.query("Keth", 2, recall=0.9)
    assert index.query("Keth", 2, candidates=4)


def test_exact_answers_on_an_index_without_a_lower_bound(tmp_path):
    index = waymark.build(NAMES * 3, tmp_path / "f.wmk", embedding="fastmap", dim=2)
    with pytest.raises(waymark.BadInputError, match="exact answers need a lower bound"):
        index.query("Keth", 2, exact=True)
    assert index.query("Keth Landing", 1)[0][2] == 0.0


def test_damaged_and_foreign_files_are_refused(tmp_path):
    good = waymark.build(NAMES, tmp_path / "good.wmk")
    data = bytearray(open(good.path, "rb").read())
    (tmp_path / "cut.wmk").write_bytes(bytes(data[: len(data) // 2]))
    with pytest.raises(waymark.CorruptIndexError, match="cut.wmk"):
        waymark.open(tmp_path / "cut.wmk")
    (tmp_path / "text.wmk").write_text("Orvane Quay\n")
    with pytest.raises(waymark.CorruptIndexError, match="text.wmk"):
        waymark.open(tmp_path / "text.wmk")
    with pytest.raises(waymark.CorruptIndexError, match="is a folder"):
        waymark.open(tmp_path)
    flipped = bytearray(data)
    flipped[-100] ^= 0xFF
    (tmp_path / "flipped.wmk").write_bytes(bytes(flipped))
    with pytest.raises(waymark.CorruptIndexError, match="flipped.wmk"):
        waymark.open(tmp_path / "flipped.wmk").inspect(verify=True)
    with pytest.raises(waymark.BadInputError, match="nowhere.wmk"):
        waymark.open(tmp_path / "nowhere.wmk")


def test_distortion_over_no_pairs_says_so(tmp_path):
    index = waymark.build(["Keth"], tmp_path / "one.wmk")
    report = index.distortion()
    assert report["pairs"] == 0 and report["spaces"] == []


def test_item_numbers_out_of_range(tmp_path):
    index = waymark.build(NAMES, tmp_path / "r.wmk")
    with pytest.raises(IndexError, match="item number 4 is not in the index"):
        index.item(4)
    with pytest.raises(IndexError):
        index.ids([0, 9])
    assert index.ids([3, -1]) == [3, None]
