//! FASTA and FASTQ items and queries: ids from the record names, gzip input, bad records
//! refused with their number; answers checked against the same sequences given as text and
//! against `strsim::hamming` (a general-purpose reference crate).

use std::io::Write;

use predicates::prelude::*;
use predicates::str::contains;
use serde_json::Value;
use waymark::ingest::{
    read_corpus_from, read_sequences, Ids, IngestOptions, InputFormat, SequenceFormat,
};

use crate::util::{demo, demo_lines, json_lines, Dir};

fn fasta() -> IngestOptions {
    IngestOptions {
        format: Some(InputFormat::Sequences(SequenceFormat::Fasta)),
        ..IngestOptions::default()
    }
}

fn gzip(bytes: &[u8]) -> Vec<u8> {
    let mut e = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::default());
    e.write_all(bytes).unwrap();
    e.finish().unwrap()
}

/// `waymark query INDEX -k 3 --exact` with `--queries FILE`, as JSON values.
fn exact_answers(d: &Dir, idx: &std::path::Path, queries: &std::path::Path) -> Vec<Value> {
    let out = d
        .cmd()
        .arg("query")
        .arg(idx)
        .args(["-k", "3", "--exact", "--queries"])
        .arg(queries)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    json_lines(&out)
}

/// The neighbours of an answer as (item, distance), ids left out.
fn found(a: &Value) -> Vec<(String, u64)> {
    a["neighbors"]
        .as_array()
        .unwrap()
        .iter()
        .map(|n| {
            (
                n["item"].as_str().unwrap().to_string(),
                n["distance"].as_u64().unwrap(),
            )
        })
        .collect()
}

#[test]
fn fasta_items_and_fastq_queries_answer_like_the_same_sequences_as_text() {
    let d = Dir::new();
    let opts = ["--metric", "hamming", "--dim", "16", "-q"];
    let from_fa = d.build(&demo("barcodes.fa"), "fa.wmk", &opts);
    let from_txt = d.build(&demo("barcodes.txt"), "txt.wmk", &opts);
    let by_fq = exact_answers(&d, &from_fa, &demo("barcode-reads.fq"));
    let by_txt = exact_answers(&d, &from_txt, &demo("barcode-reads.txt"));
    let codes = demo_lines("barcodes.txt");
    let reads = demo_lines("barcode-reads.txt");
    assert_eq!((by_fq.len(), by_txt.len()), (500, 500));
    for (i, (q, t)) in by_fq.iter().zip(&by_txt).enumerate() {
        // The read's record: its name (the first word of its header) and header line.
        assert_eq!(q["line"], 4 * i + 1);
        let name = q["name"].as_str().unwrap();
        assert!(
            name.starts_with(&format!("vsm-run7:{:04}:", i + 1)),
            "{name}"
        );
        assert_eq!(q["query"], reads[i].as_str());
        assert_eq!(found(q), found(t), "read {i}");
        // Ids are the barcodes' record names, `bc` and the 1-based record number.
        for (n, m) in q["neighbors"]
            .as_array()
            .unwrap()
            .iter()
            .zip(t["neighbors"].as_array().unwrap())
        {
            let line = m["id"].as_u64().unwrap() as usize;
            assert_eq!(n["id"], format!("bc{:05}", line + 1));
            assert_eq!(n["item"], codes[line].as_str());
            // strsim: the true Hamming distance of the read and the answer.
            let h = strsim::hamming(&reads[i], &codes[line]).unwrap() as u64;
            assert_eq!(n["distance"].as_u64(), Some(h));
        }
    }
    // Each read was made from a barcode by 1 or 2 substitutions (demo-data/README.md).
    assert!(by_fq
        .iter()
        .all(|a| a["neighbors"][0]["distance"].as_u64().unwrap() <= 2));
}

#[test]
fn gzip_items_and_queries_read_like_plain_ones() {
    let d = Dir::new();
    let fq = std::fs::read(demo("barcode-reads.fq")).unwrap();
    let plain = d.write("reads.fq", &fq);
    let gz = d.write("reads.fq.gz", &gzip(&fq));
    // Compressed input is told by its bytes, whatever its name.
    let gz_named_plain = d.write("also-reads.fastq", &gzip(&fq));
    let opts = ["--metric", "hamming", "--dim", "8", "-q"];
    let a = d.build(&plain, "a.wmk", &opts);
    let b = d.build(&gz, "b.wmk", &opts);
    let c = d.build(&gz_named_plain, "c.wmk", &opts);
    let queries = d.write(
        "q.fa.gz",
        &gzip(b">q1 first\nACGTACGTACGT\n>q2\nTTTTGGGGCCCC\n"),
    );
    let want = exact_answers(&d, &a, &queries);
    assert_eq!(want.len(), 2);
    assert_eq!(
        (want[0]["name"].as_str(), want[1]["name"].as_str()),
        (Some("q1"), Some("q2"))
    );
    assert_eq!(want[1]["line"], 3);
    for idx in [&b, &c] {
        assert_eq!(exact_answers(&d, idx, &queries), want);
    }
    // The ids are the reads' names.
    assert!(want[0]["neighbors"][0]["id"]
        .as_str()
        .unwrap()
        .starts_with("vsm-run7:"));
}

#[test]
fn wrapped_fasta_crlf_a_bom_and_descriptions_are_read_as_records() {
    let text = "\u{feff}>Keth-1 sample from Keth Landing\r\nACGTAC\r\nGTTA\r\n>Orvane-2\r\n\r\nTTGA\r\n>empty\r\n>Mirrow-3 x\r\nGG\r\n";
    let c = read_corpus_from(text.as_bytes(), "s.fa", &fasta()).unwrap();
    assert_eq!(c.items, ["ACGTACGTTA", "TTGA", "GG"]);
    assert_eq!(
        c.ids,
        Ids::Text(vec!["Keth-1".into(), "Orvane-2".into(), "Mirrow-3".into()])
    );
    // The record with no sequence is a blank record, skipped and counted.
    assert_eq!((c.blank_skipped, c.records), (1, 4));
    // The FASTQ example of the format's description (Cock et al., Nucleic Acids Research
    // 38:1767, 2010; the record as recalled from memory): quality characters such as '@'
    // and '+' are not record marks in the quality line.
    let fq = "@SEQ_ID\nGATTTGGGGTTCAAAGCAGTATCGATCAAATAGTAAATCCATTTGTTCAACTCACAGTTT\n+\n\
              !''*((((***+))%%%++)(%%%%).1***-+*''))**55CCF>>>>>>CCCCCCC65\n\
              @r2 second\nAC\n+r2 second\n@+\n";
    let recs = read_sequences(fq.as_bytes(), "r.fq", SequenceFormat::Fastq).unwrap();
    let names: Vec<&str> = recs.iter().map(|r| r.name.as_str()).collect();
    assert_eq!(names, ["SEQ_ID", "r2"]);
    assert_eq!(recs[0].sequence.len(), 60);
    assert_eq!((recs[0].line, recs[1].line), (1, 5));
    assert_eq!(recs[1].sequence, "AC");
}

#[test]
fn bad_records_are_refused_with_their_number_and_line() {
    let d = Dir::new();
    let good = "@r1 a\nACGT\n+\nIIII\n";
    for (file, text, want) in [
        (
            "cut.fq",
            format!("{good}@r2\nACGTT\n"),
            "cut.fq:6: record 2: the record is cut short",
        ),
        (
            "lengths.fq",
            format!("{good}@r2\nACGTT\n+\nIIII\n"),
            "lengths.fq:5: record 2: the sequence has 5 letters and the quality string 4",
        ),
        (
            "plus.fq",
            format!("{good}@r2\nACGTT\n-\nIIIII\n"),
            "plus.fq:7: record 2: the line after the sequence must start with '+'",
        ),
        (
            "noname.fq",
            format!("{good}{good}@\nACGTT\n+\nIIIII\n"),
            "noname.fq:9: record 3: the record has no name",
        ),
        (
            "noname.fa",
            ">r1\nACGT\n>  \nACGTT\n".to_string(),
            "noname.fa:3: record 2: the record has no name",
        ),
        (
            "start.fa",
            "ACGT\n>r1\nACGT\n".to_string(),
            "start.fa:1: record 1: a FASTA record must start with '>' and this line starts with \"ACGT\"",
        ),
        ("empty.fq", String::new(), "no items in"),
        ("blank.fa", "\n\n".to_string(), "no items in"),
    ] {
        let p = d.write(file, text.as_bytes());
        d.cmd()
            .arg("build")
            .arg(&p)
            .args(["-o", "x.wmk"])
            .assert()
            .code(2)
            .stderr(contains(want));
        assert!(!d.path("x.wmk").exists(), "{file}");
        // The same bytes as a queries file are refused alike, before any answer.
        if !text.is_empty() && !text.trim().is_empty() {
            let items = d.write("items.txt", b"ACGT\n");
            let idx = d.build(&items, "i.wmk", &["--dim", "1", "-q"]);
            d.cmd()
                .arg("query")
                .arg(&idx)
                .arg("--queries")
                .arg(&p)
                .assert()
                .code(2)
                .stdout("")
                .stderr(contains(want));
            std::fs::remove_file(idx).unwrap();
        }
    }
    // A damaged gzip stream is an input error naming the file.
    let p = d.write("broken.fq.gz", &gzip(good.as_bytes())[..20]);
    d.cmd()
        .arg("build")
        .arg(&p)
        .args(["-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("broken.fq.gz: reading the gzip-compressed input"));
}

#[test]
fn input_format_names_the_layout_and_field_options_do_not_apply() {
    let d = Dir::new();
    let p = d.write("codes.txt", b">a\nACGT\n>b\nACGA\n");
    d.cmd()
        .arg("build")
        .arg(&p)
        .args(["--input-format", "fasta", "--field", "name", "-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(contains(
            "--field and --id-field need a CSV, TSV or JSON Lines input",
        ));
    let idx = d.build(
        &p,
        "x.wmk",
        &["--input-format", "fasta", "--dim", "1", "-q"],
    );
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--format", "tsv"])
        .write_stdin("ACGA\n")
        .output()
        .unwrap();
    assert_eq!(
        String::from_utf8(out.stdout).unwrap(),
        "ACGA\t1\tb\tACGA\t0\n"
    );
    // By extension, with and without .gz.
    for (name, want) in [
        ("x.fa", SequenceFormat::Fasta),
        ("x.FASTA", SequenceFormat::Fasta),
        ("x.fna.gz", SequenceFormat::Fasta),
        ("x.fq", SequenceFormat::Fastq),
        ("x.fastq.gz", SequenceFormat::Fastq),
    ] {
        assert_eq!(
            InputFormat::from_path(std::path::Path::new(name)),
            InputFormat::Sequences(want),
            "{name}"
        );
    }
    assert_eq!(
        InputFormat::from_path(std::path::Path::new("x.txt.gz")),
        InputFormat::Text
    );
}

#[test]
fn a_query_of_another_length_is_reported_inline_with_its_record_name() {
    let d = Dir::new();
    let idx = d.build(
        &demo("barcodes.fa"),
        "bc.wmk",
        &["--metric", "hamming", "--dim", "8", "-q"],
    );
    let q = d.write(
        "q.fq",
        b"@short\nACGT\n+\nIIII\n@full x\nTTAGGCGCATCC\n+\nIIIIIIIIIIII\n",
    );
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--errors-inline", "--queries"])
        .arg(&q)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let replies: Vec<Value> = json_lines(&out);
    assert_eq!(replies[0]["line"], 1);
    assert_eq!(replies[0]["name"], "short");
    assert!(replies[0]["error"]
        .as_str()
        .unwrap()
        .contains("4 characters"));
    assert_eq!(replies[1]["name"], "full");
    // TTAGGCGCATCC is the first barcode of the demo data (demo-data/barcodes.fa).
    assert_eq!(replies[1]["neighbors"][0]["id"], "bc00001");
    assert_eq!(replies[1]["neighbors"][0]["distance"], 0);
}

#[test]
fn fastq_queries_from_stdin_and_a_layout_named_over_the_extension() {
    let d = Dir::new();
    let items = d.write("codes.txt", b"ACGTACGT\nTTGTACGT\nGGGGCCCC\n");
    let idx = d.build(
        &items,
        "c.wmk",
        &["--metric", "hamming", "--dim", "2", "-q"],
    );
    let fq = "@q1 lane1\nACGTACGA\n+\nIIIIIIII\n@q2\nGGGGCCCA\n+\nIIIIIIII\n";
    let run = |args: &[&str], stdin: &str| -> Vec<Value> {
        let out = d
            .cmd()
            .arg("query")
            .arg(&idx)
            .args(["-k", "1"])
            .args(args)
            .write_stdin(stdin.to_string())
            .assert()
            .success()
            .get_output()
            .stdout
            .clone();
        json_lines(&out)
    };
    let a = run(&["--query-format", "fastq"], fq);
    assert_eq!(a.len(), 2);
    assert_eq!(
        (a[0]["name"].as_str(), a[1]["name"].as_str()),
        (Some("q1"), Some("q2"))
    );
    assert_eq!(
        (a[0]["line"].as_u64(), a[1]["line"].as_u64()),
        (Some(1), Some(5))
    );
    // strsim: the Hamming distance of each read to its nearest code.
    assert_eq!(a[0]["neighbors"][0]["item"], "ACGTACGT");
    assert_eq!(
        a[0]["neighbors"][0]["distance"].as_u64(),
        Some(strsim::hamming("ACGTACGA", "ACGTACGT").unwrap() as u64)
    );
    assert_eq!(a[1]["neighbors"][0]["item"], "GGGGCCCC");
    // A .fq file read as lines when told so: four queries per record, the header lines of
    // another length refused in place.
    let q = d.write("q.fq", fq.as_bytes());
    let lines = run(
        &[
            "--query-format",
            "text",
            "--errors-inline",
            "--queries",
            q.to_str().unwrap(),
        ],
        "",
    );
    assert_eq!(lines.len(), 8);
    assert!(lines[0].get("name").is_none());
    assert_eq!(lines[1]["query"], "ACGTACGA");
    // A bad record on stdin is refused with its number.
    d.cmd()
        .arg("query")
        .arg(&idx)
        .args(["--query-format", "fasta"])
        .write_stdin("ACGT\n")
        .assert()
        .code(2)
        .stderr(contains(
            "<stdin>:1: record 1: a FASTA record must start with '>'",
        ));
}

proptest::proptest! {
    /// Records written out in the four-line FASTQ layout (and as FASTA with the sequence
    /// wrapped) read back as they were; any bytes made of the layouts' characters are
    /// records or an error naming a record, never a panic.
    /// (Sequences are not empty: a FASTA input that ends on a header with no sequence is
    /// refused as cut short by needletail, as it may be a truncated file; an empty record
    /// before others is a blank record.)
    #[test]
    fn records_written_out_read_back_and_any_bytes_are_refused_cleanly(
        recs in proptest::collection::vec(
            ("[A-Za-z0-9_:.-]{1,12}", "( [a-z=0-9]{1,8}){0,2}", "[ACGTN]{1,40}", 1usize..30),
            1..12),
        noise in proptest::collection::vec(proptest::sample::select(
            vec![b'>', b'@', b'+', b'\n', b'\r', b'A', b'C', b' ', b'I', b'x']), 0..80),
    ) {
        let mut fq = String::new();
        let mut fa = String::new();
        for (name, desc, seq, width) in &recs {
            let qual: String = seq.chars().map(|_| 'I').collect();
            fq.push_str(&format!("@{name}{desc}\n{seq}\n+\n{qual}\n"));
            fa.push_str(&format!(">{name}{desc}\n"));
            let bytes = seq.as_bytes();
            for chunk in bytes.chunks(*width) {
                fa.push_str(std::str::from_utf8(chunk).unwrap());
                fa.push('\n');
            }
        }
        for (text, format) in [(&fq, SequenceFormat::Fastq), (&fa, SequenceFormat::Fasta)] {
            let got = read_sequences(text.as_bytes(), "r", format).unwrap();
            proptest::prop_assert_eq!(got.len(), recs.len());
            for (g, (name, _, seq, _)) in got.iter().zip(&recs) {
                proptest::prop_assert_eq!(&g.name, name);
                proptest::prop_assert_eq!(&g.sequence, seq);
            }
            if let Err(e) = read_sequences(&noise[..], "n", format) {
                let e = e.to_string();
                proptest::prop_assert!(e.starts_with("n:") && e.contains(": record "), "{}", e);
            }
        }
    }
}

/// A small gzip file that unpacks to far more than the memory budget allows is stopped while
/// it unpacks, with the budget's message, and leaves no index.
#[test]
fn bad_input_a_gzip_file_that_unpacks_beyond_the_budget_is_stopped() {
    let d = Dir::new();
    let mut fa = Vec::new();
    for i in 0..200_000 {
        fa.extend_from_slice(
            format!(">r{i}\nACGTACGTACGTACGTACGTACGTACGTACGTACGTACGT\n").as_bytes(),
        );
    }
    assert!(fa.len() > 9_000_000);
    let gz = d.write("bomb.fa.gz", &gzip(&fa));
    assert!(std::fs::metadata(&gz).unwrap().len() < 1_000_000);
    let out = d.path("bomb.wmk");
    d.cmd()
        .env("WAYMARK_MEMORY_BUDGET", "6000000")
        .arg("build")
        .arg(&gz)
        .arg("-o")
        .arg(&out)
        .assert()
        .code(2)
        .stderr(
            contains("bomb.fa.gz").and(contains("reading stopped after more than 2000000 bytes")),
        );
    assert!(!out.exists());
}
