//! Reading items: text, CSV/TSV, JSON Lines, ids, normalisation and bad input.

use waymark::ingest::{
    read_corpus, read_corpus_from, Ids, IngestError, IngestOptions, InputFormat, Normalize,
};

fn opts(format: InputFormat, field: Option<&str>, id: Option<&str>) -> IngestOptions {
    IngestOptions {
        format: Some(format),
        field: field.map(str::to_string),
        id_field: id.map(str::to_string),
        normalize: Normalize::default(),
    }
}

fn text(bytes: &[u8]) -> Result<waymark::ingest::Corpus, IngestError> {
    read_corpus_from(bytes, "names.txt", &opts(InputFormat::Text, None, None))
}

#[test]
fn text_lines_with_bom_crlf_and_blank_lines() {
    let c = text(b"\xEF\xBB\xBFOrvane Quay\r\n\r\nKeth Landing\nOrvane Quay").unwrap();
    assert_eq!(c.items, ["Orvane Quay", "Keth Landing", "Orvane Quay"]);
    assert_eq!(c.ids, Ids::Int(vec![0, 2, 3]));
    assert_eq!((c.blank_skipped, c.records), (1, 4));
    assert!(c.keys.is_none());
}

#[test]
fn invalid_utf8_and_nul_name_the_line() {
    let e = text(b"one\ntwo\nth\xffree\n").unwrap_err().to_string();
    assert_eq!(e, "names.txt:3: invalid UTF-8 at byte 3 of the line");
    let e = text(b"one\nt\0wo\n").unwrap_err().to_string();
    assert_eq!(e, "names.txt:2: the item contains a NUL byte");
}

#[test]
fn empty_input_is_an_error() {
    let e = text(b"\n\r\n\n").unwrap_err().to_string();
    assert_eq!(e, "no items in names.txt (3 blank records skipped)");
}

#[test]
fn csv_quoting_columns_by_name_or_number_and_text_ids() {
    // RFC 4180 quoting (a comma and a doubled quote inside a quoted field), as parsed by
    // the csv crate.
    let data = b"code,name\nKV-1,\"Row, East\"\nKV-2,\"The \"\"Old\"\" Slip\"\nKV-3,\n";
    let c = read_corpus_from(
        &data[..],
        "r.csv",
        &opts(
            InputFormat::Csv { delimiter: b',' },
            Some("name"),
            Some("code"),
        ),
    )
    .unwrap();
    assert_eq!(c.items, ["Row, East", "The \"Old\" Slip"]);
    assert_eq!(c.ids, Ids::Text(vec!["KV-1".into(), "KV-2".into()]));
    assert_eq!(c.blank_skipped, 1);
    let c = read_corpus_from(
        &data[..],
        "r.csv",
        &opts(InputFormat::Csv { delimiter: b',' }, Some("1"), None),
    )
    .unwrap();
    assert_eq!(c.ids, Ids::Int(vec![0, 1]));
    let e = read_corpus_from(
        &data[..],
        "r.csv",
        &opts(InputFormat::Csv { delimiter: b',' }, Some("street"), None),
    )
    .unwrap_err()
    .to_string();
    assert_eq!(
        e,
        "r.csv: no column \"street\" in the header (columns: code, name)"
    );
}

#[test]
fn tsv_and_ragged_rows() {
    let data = b"code\tname\nA\tOrvane Quay\nB\n";
    let e = read_corpus_from(
        &data[..],
        "r.tsv",
        &opts(InputFormat::Csv { delimiter: b'\t' }, Some("name"), None),
    )
    .unwrap_err()
    .to_string();
    assert_eq!(
        e,
        "r.tsv:3: the row has 1 fields, so column \"name\" is missing"
    );
}

#[test]
fn json_lines_ids_typed_as_in_the_input() {
    let o = opts(InputFormat::JsonLines, Some("name"), Some("id"));
    let c = read_corpus_from(
        &b"{\"id\": 7, \"name\": \"Orvane Quay\"}\n\n{\"id\": 9, \"name\": \"Keth\"}\n"[..],
        "r.jsonl",
        &o,
    )
    .unwrap();
    assert_eq!(c.ids, Ids::Int(vec![7, 9]));
    let c = read_corpus_from(
        &b"{\"id\": \"a\", \"name\": \"Orvane Quay\"}\n"[..],
        "r.jsonl",
        &o,
    )
    .unwrap();
    assert_eq!(c.ids, Ids::Text(vec!["a".into()]));
    let e = read_corpus_from(
        &b"{\"id\": 1, \"name\": \"x\"}\n{\"id\": \"b\", \"name\": \"y\"}\n"[..],
        "r.jsonl",
        &o,
    )
    .unwrap_err()
    .to_string();
    assert!(e.starts_with("r.jsonl:2: this id is a string"), "{e}");
    let e = read_corpus_from(&b"{\"id\": 1, \"name\": 5}\n"[..], "r.jsonl", &o)
        .unwrap_err()
        .to_string();
    assert_eq!(
        e,
        "r.jsonl:1: field \"name\" must be a string, found a number"
    );
    let e = read_corpus_from(&b"{\"id\": 1.5, \"name\": \"x\"}\n"[..], "r.jsonl", &o)
        .unwrap_err()
        .to_string();
    assert_eq!(
        e,
        "r.jsonl:1: id field \"id\" must be an integer or a string, found a non-integer number"
    );
    let e = read_corpus_from(&b"{\"id\": 1}\n"[..], "r.jsonl", &o)
        .unwrap_err()
        .to_string();
    assert_eq!(e, "r.jsonl:1: field \"name\" is missing");
    let e = read_corpus_from(&b"[1]\n"[..], "r.jsonl", &o)
        .unwrap_err()
        .to_string();
    assert_eq!(e, "r.jsonl:1: expected a JSON object, found an array");
}

#[test]
fn fold_case_and_trim_make_keys() {
    let o = IngestOptions {
        format: Some(InputFormat::Text),
        normalize: Normalize {
            fold_case: true,
            trim: true,
        },
        ..Default::default()
    };
    let c = read_corpus_from(&b"keth\n  Orvane Quay \n   \n"[..], "n.txt", &o).unwrap();
    assert_eq!(c.items, ["keth", "  Orvane Quay "]);
    assert_eq!(
        c.keys,
        Some(vec!["keth".to_string(), "orvane quay".to_string()])
    );
    assert_eq!(c.blank_skipped, 1);
}

#[test]
fn a_missing_file_names_the_path() {
    let e = read_corpus("no/such/file.txt".as_ref(), &IngestOptions::default())
        .unwrap_err()
        .to_string();
    assert!(e.starts_with("no/such/file.txt: "), "{e}");
}

/// Open data: Debian's wamerican list. The count of items read equals the count of
/// non-empty lines found independently by the standard library.
#[test]
fn the_debian_word_list_reads_completely() {
    let path = std::path::Path::new("/usr/share/dict/american-english");
    if !path.exists() {
        panic!("install Debian's wamerican (apt-get install -y wamerican) to run this test");
    }
    let c = read_corpus(path, &IngestOptions::default()).unwrap();
    let text = std::fs::read_to_string(path).unwrap();
    assert_eq!(
        c.items.len(),
        text.lines().filter(|l| !l.is_empty()).count()
    );
    assert_eq!(
        c.items.len(),
        104_334,
        "the wamerican 2020.12.07 list has 104,334 words (FIELD-NOTES)"
    );
}
