"""Queries read from a file, as `waymark query --queries FILE --query-format …` reads them:
one per line, or the records of a FASTA or FASTQ file. The answers to them equal the command
line's on the same file, and a malformed record is refused with the file and line."""

import gzip

import pytest

import waymark
from conftest import json_lines, run_cli

# An invented run of a sequencing plate: eight twelve-base sample barcodes, and reads of
# them with a substitution or two (FASTQ, with qualities), named by their position.
BARCODES = [
    "ACGTTGCAACGT", "TTAGGCGCATCC", "GATCCAGTTGCA", "CCATGGTACAGT",
    "AGTCAGTCGGTA", "TGCATCGATCGA", "CAGTTCAAGCTG", "GGTACCTTGACA",
]
READS = """\
@kelvin-lane2:0001:1 tray=Harrowgate
ACGTTGCAACGA
+
IIIIIIIIIII#
@kelvin-lane2:0002:7 tray=Harrowgate
CAGTTCTAGCTG
+
IIIIIIIIIIII
@kelvin-lane2:0003:3
GATCCAGTAGCT
+
IIIIIIII?III
@kelvin-lane2:0004:5 tray=Morrow
AGTCAGTCGGTA
+
IIIIIIIIIIII
"""


@pytest.fixture
def plate(tmp_path):
    (tmp_path / "barcodes.txt").write_text("\n".join(BARCODES) + "\n")
    index = waymark.build(BARCODES, tmp_path / "barcodes.wmk", metric="hamming", dim=4)
    (tmp_path / "reads.fq").write_text(READS)
    return tmp_path, index


def test_fastq_reads_are_read_as_the_command_line_reads_them(plate):
    tmp_path, index = plate
    queries = waymark.read_queries(tmp_path / "reads.fq")
    assert queries == [
        (1, "kelvin-lane2:0001:1", "ACGTTGCAACGA"),
        (5, "kelvin-lane2:0002:7", "CAGTTCTAGCTG"),
        (9, "kelvin-lane2:0003:3", "GATCCAGTAGCT"),
        (13, "kelvin-lane2:0004:5", "AGTCAGTCGGTA"),
    ]
    # The command line's answers on the same file: the same lines, names, queries and
    # neighbours, in order.
    cli = json_lines(run_cli("query", index.path, "--queries", tmp_path / "reads.fq", "-k", "2", "--exact").stdout)
    assert [(a["line"], a["name"], a["query"]) for a in cli] == queries
    for (line, name, query), answer in zip(queries, cli):
        assert [(n["id"], n["item"], n["distance"]) for n in answer["neighbors"]] == index.query(query, 2, exact=True)
    numbers, distances = index.query_many([q for _, _, q in queries], 2, exact=True)
    assert [[n["id"] for n in a["neighbors"]] for a in cli] == index.ids(numbers)
    # The reads' barcodes by hand: one or two substitutions from the barcode each came from.
    assert [a["neighbors"][0]["item"] for a in cli] == [BARCODES[0], BARCODES[6], BARCODES[2], BARCODES[4]]
    assert [a["neighbors"][0]["distance"] for a in cli] == [1, 1, 2, 0]


def test_the_format_is_taken_from_the_name_or_given(plate):
    tmp_path, index = plate
    # A gzip-compressed copy, and the same records under a name that does not tell them.
    with gzip.open(tmp_path / "reads.fastq.gz", "wt") as f:
        f.write(READS)
    (tmp_path / "reads.dat").write_text(READS)
    want = waymark.read_queries(tmp_path / "reads.fq")
    assert waymark.read_queries(tmp_path / "reads.fastq.gz") == want
    assert waymark.read_queries(tmp_path / "reads.dat", format="fastq") == want
    # Read as lines, every line is a query (as `--query-format text` reads them).
    lines = waymark.read_queries(tmp_path / "reads.fq", format="text")
    assert lines[:2] == [(1, None, "@kelvin-lane2:0001:1 tray=Harrowgate"), (2, None, "ACGTTGCAACGA")]
    assert len(lines) == 16
    # FASTA: the sequence lines of a record joined, the name the header's first word.
    (tmp_path / "wells.fa").write_text(">wellA1 plate=Kethmoor\nACGTTG\nCAACGT\n>wellA2\r\nTTAGGCGCATCC\r\n")
    assert waymark.read_queries(tmp_path / "wells.fa") == [(1, "wellA1", "ACGTTGCAACGT"), (4, "wellA2", "TTAGGCGCATCC")]
    cli = json_lines(run_cli("query", index.path, "--queries", tmp_path / "wells.fa", "-k", "1").stdout)
    assert [(a["line"], a["name"], a["query"]) for a in cli] == waymark.read_queries(tmp_path / "wells.fa")
    # Text lines drop \r\n and a leading byte-order mark, as the command line does.
    (tmp_path / "q.txt").write_bytes(b"\xef\xbb\xbfACGTTGCAACGT\r\nTTAGGCGCATCC\n")
    assert waymark.read_queries(tmp_path / "q.txt") == [(1, None, "ACGTTGCAACGT"), (2, None, "TTAGGCGCATCC")]


def test_a_malformed_record_is_refused_with_the_file_and_line(plate):
    tmp_path, index = plate
    # The third record's quality line is one character short of its sequence.
    bad = READS.replace("IIIIIIII?III", "IIIIIII?III")
    (tmp_path / "short.fq").write_text(bad)
    cli = run_cli_failing("query", index.path, "--queries", tmp_path / "short.fq")
    with pytest.raises(waymark.BadInputError) as err:
        waymark.read_queries(tmp_path / "short.fq")
    message = str(err.value)
    assert message.startswith(f"{tmp_path / 'short.fq'}:9: record 3: ")
    # The command line refuses the same record with the same words.
    assert cli == f"waymark: error: {message}"
    # A line that is not UTF-8, a folder, an empty file, an unknown format.
    (tmp_path / "latin1.txt").write_bytes(b"ACGTTGCAACGT\nGAT\xe7CAGTTGCA\n")
    with pytest.raises(waymark.BadInputError, match=r"latin1.txt:2: the query is not valid UTF-8 \(byte 4\)"):
        waymark.read_queries(tmp_path / "latin1.txt")
    assert run_cli_failing("query", index.path, "--queries", tmp_path / "latin1.txt") == (
        f"waymark: error: {tmp_path / 'latin1.txt'}:2: the query is not valid UTF-8 (byte 4)"
    )
    with pytest.raises(waymark.BadInputError, match="is a folder"):
        waymark.read_queries(tmp_path)
    (tmp_path / "empty.fa").write_text("")
    with pytest.raises(waymark.BadInputError, match="empty.fa: no queries in the file"):
        waymark.read_queries(tmp_path / "empty.fa")
    with pytest.raises(waymark.BadInputError, match="format `sam` is not one of text, fasta, fastq"):
        waymark.read_queries(tmp_path / "reads.fq", format="sam")
    with pytest.raises(waymark.BadInputError, match="no-such.fq"):
        waymark.read_queries(tmp_path / "no-such.fq")


def run_cli_failing(*args) -> str:
    """Runs `waymark ARGS…`, expects exit code 2, returns its stderr's last line."""
    import subprocess

    from conftest import waymark_bin

    out = subprocess.run([str(waymark_bin()), *map(str, args)], capture_output=True, text=True)
    assert out.returncode == 2, out
    return out.stderr.strip().splitlines()[-1]
