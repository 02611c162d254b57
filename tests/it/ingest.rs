//! Reading items: text, CSV/TSV, JSON Lines, ids, normalisation and bad input.

use waymark::ingest::{
    read_corpus, read_corpus_from, Corpus, Ids, IngestError, IngestOptions, InputFormat, Normalize,
};

use crate::util::{word_list, word_list_path};

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
            ..Normalize::default()
        },
        ..Default::default()
    };
    let c = read_corpus_from(&b"keth\n  Orvane Quay \n   \n"[..], "n.txt", &o).unwrap();
    assert_eq!(c.items, ["keth", "  Orvane Quay "]);
    assert_eq!(
        c.keys,
        Some(vec![b"keth".to_vec(), b"orvane quay".to_vec()])
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
    let c = read_corpus(word_list_path(), &IngestOptions::default()).unwrap();
    let text = word_list();
    assert_eq!(
        c.items.len(),
        text.lines().filter(|l| !l.is_empty()).count()
    );
    assert_eq!(
        c.items.len(),
        104_334,
        "Debian package wamerican 2020.12.07-2 ships 104,334 words (counted with wc -l)"
    );
}

fn csv(data: &[u8], field: Option<&str>, id: Option<&str>) -> Result<Corpus, IngestError> {
    read_corpus_from(
        data,
        "r.csv",
        &opts(InputFormat::Csv { delimiter: b',' }, field, id),
    )
}

fn jsonl(data: &[u8], id: Option<&str>) -> Result<Corpus, IngestError> {
    read_corpus_from(
        data,
        "r.jsonl",
        &opts(InputFormat::JsonLines, Some("name"), id),
    )
}

#[test]
fn the_format_is_taken_from_the_extension_of_a_real_file() {
    let dir = tempfile::tempdir().unwrap();
    // A BOM before the header, CRLF rows, a column chosen by number, a duplicate kept.
    let tsv = dir.path().join("register.TSV");
    std::fs::write(
        &tsv,
        "\u{feff}code\tname\tisland\r\nKV-1\tOrvane Quay\tVessa\r\nKV-2\tÅrnholt Steps\tKaldra\r\nKV-3\tOrvane Quay\tKaldra\r\n",
    )
    .unwrap();
    let o = IngestOptions {
        field: Some("1".into()),
        id_field: Some("code".into()),
        ..Default::default()
    };
    let c = read_corpus(&tsv, &o).unwrap();
    assert_eq!(c.items, ["Orvane Quay", "Årnholt Steps", "Orvane Quay"]);
    assert_eq!(
        c.ids,
        Ids::Text(vec!["KV-1".into(), "KV-2".into(), "KV-3".into()])
    );
    assert_eq!((c.records, c.blank_skipped), (3, 0));

    let jl = dir.path().join("register.ndjson");
    std::fs::write(&jl, "{\"n\": \"Keth\"}\r\n\r\n{\"n\": \"Brae\"}\r\n").unwrap();
    let o = IngestOptions {
        field: Some("n".into()),
        ..Default::default()
    };
    let c = read_corpus(&jl, &o).unwrap();
    assert_eq!(c.items, ["Keth", "Brae"]);
    assert_eq!(c.ids, Ids::Int(vec![0, 2]));
}

#[test]
fn json_string_escapes_as_written_by_serde_json() {
    // The lines are written by serde_json (an outside encoder), so the escapes in them are
    // serde_json's, not ours; reading must give back the original strings.
    let names = [
        "Orvane \"Old\" Quay",
        "Back\\slash Row",
        "Tessamir Ré",
        "Skerrø\tWynd",
        "Kald 🐚 Landing",
    ];
    let mut data = String::new();
    for (i, n) in names.iter().enumerate() {
        data.push_str(&serde_json::json!({ "id": format!("S{i}"), "name": n }).to_string());
        data.push('\n');
    }
    let c = jsonl(data.as_bytes(), Some("id")).unwrap();
    assert_eq!(c.items, names);
    assert_eq!(
        c.ids,
        Ids::Text((0..names.len()).map(|i| format!("S{i}")).collect())
    );
}

#[test]
fn json_errors_name_the_file_line_and_column() {
    let e = jsonl(b"{\"name\": \"a\"}\n{\"name\": \"b\",}\n", None)
        .unwrap_err()
        .to_string();
    assert!(e.starts_with("r.jsonl:2: invalid JSON at column "), "{e}");
    assert!(
        !e.contains("line 1"),
        "serde_json's own line count leaks: {e}"
    );

    let e = jsonl(
        b"{\"id\": \"a\", \"name\": \"x\"}\n{\"id\": 2, \"name\": \"y\"}\n",
        Some("id"),
    )
    .unwrap_err()
    .to_string();
    assert!(e.starts_with("r.jsonl:2: this id is a number"), "{e}");

    let e = jsonl(
        b"{\"id\": 1, \"name\": \"x\"}\n{\"name\": \"y\"}\n",
        Some("id"),
    )
    .unwrap_err()
    .to_string();
    assert_eq!(e, "r.jsonl:2: id field \"id\" is missing");

    // 2^64 - 1 is an integer JSON number that does not fit an i64.
    let e = jsonl(
        b"{\"id\": 18446744073709551615, \"name\": \"x\"}\n",
        Some("id"),
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.starts_with("r.jsonl:1: id field \"id\" must be an integer or a string, found an integer larger than"),
        "{e}"
    );

    let e = jsonl(b"{\"id\": null, \"name\": \"x\"}\n", Some("id"))
        .unwrap_err()
        .to_string();
    assert_eq!(
        e,
        "r.jsonl:1: id field \"id\" must be an integer or a string, found null"
    );

    // An escaped NUL decodes to a NUL character, which no item may hold.
    let e = jsonl(b"{\"name\": \"a\\u0000b\"}\n", None)
        .unwrap_err()
        .to_string();
    assert_eq!(e, "r.jsonl:1: the item contains a NUL byte");
}

#[test]
fn csv_errors_name_the_line_and_column() {
    let e = csv(b"code,name\nKV-1,Or\xffvane\n", Some("name"), None)
        .unwrap_err()
        .to_string();
    assert_eq!(
        e,
        "r.csv:2: invalid UTF-8 in column \"name\" (number 1, counting from 0)"
    );

    let e = csv(b"code,name\nKV-1,Orvane\nKV-2,Ke\0th\n", Some("name"), None)
        .unwrap_err()
        .to_string();
    assert_eq!(e, "r.csv:3: the item contains a NUL byte");

    let e = csv(b"code,name\nKV-1,Orvane\n", None, None)
        .unwrap_err()
        .to_string();
    assert_eq!(
        e,
        "r.csv: the input has 2 columns (code, name): say which holds the items with --field"
    );

    // A ragged row missing the id column.
    let e = csv(
        b"name,code\nOrvane,KV-1\nKeth\n",
        Some("name"),
        Some("code"),
    )
    .unwrap_err()
    .to_string();
    assert_eq!(
        e,
        "r.csv:3: the row has 1 fields, so column \"code\" is missing"
    );
}

#[test]
fn csv_with_one_column_needs_no_field_and_empty_csv_has_no_items() {
    let c = csv(b"name\nOrvane\n\"Keth, Lower\"\n", None, None).unwrap();
    assert_eq!(c.items, ["Orvane", "Keth, Lower"]);
    for data in [&b""[..], &b"code,name\n"[..]] {
        let e = csv(data, Some("name"), None).unwrap_err().to_string();
        assert_eq!(e, "no items in r.csv (0 blank records skipped)");
    }
}

#[test]
fn text_errors_count_bytes_as_in_the_file_and_refuse_fields() {
    // BOM (3 bytes) + "ab", so the bad byte is the 6th of the line as stored.
    let e = text(b"\xEF\xBB\xBFab\xff\n").unwrap_err().to_string();
    assert_eq!(e, "names.txt:1: invalid UTF-8 at byte 6 of the line");
    let e = read_corpus_from(
        &b"Orvane\n"[..],
        "names.txt",
        &opts(InputFormat::Text, Some("name"), None),
    )
    .unwrap_err()
    .to_string();
    assert!(e.starts_with("names.txt: "), "{e}");
}

#[test]
fn fold_case_agrees_with_std_lowercase_on_title_case_letters() {
    // U+01C5 (Dz with caron, title case) is not `char::is_uppercase`, yet lower-cases to
    // U+01C6; the reference here is std's `str::to_lowercase`.
    let n = Normalize {
        fold_case: true,
        ..Normalize::default()
    };
    for s in ["\u{1C5}emal row", "ÅRNHOLT", "Skerrø", "plain", "ΣΚΕΡΡΟΣ"] {
        assert_eq!(n.apply(s), s.to_lowercase(), "{s}");
    }
    assert!(matches!(n.apply("plain"), std::borrow::Cow::Borrowed(_)));
    assert!(Normalize::default().is_identity() && !n.is_identity());
}

/// Open data: Debian's wamerican-insane list (about 650k words). Counted independently by
/// the standard library; the time is printed (in a release build it is well under 1 s).
#[test]
fn the_large_debian_word_list_reads_completely() {
    let path = std::path::Path::new("/usr/share/dict/american-english-insane");
    if !path.exists() {
        println!(
            "skipped: {} is absent (Debian package wamerican-insane)",
            path.display()
        );
        return;
    }
    let t = std::time::Instant::now();
    let c = read_corpus(path, &IngestOptions::default()).unwrap();
    let elapsed = t.elapsed();
    println!(
        "read {} items in {:.3} s",
        c.items.len(),
        elapsed.as_secs_f64()
    );
    let text = std::fs::read_to_string(path).unwrap();
    let lines: Vec<&str> = text.lines().filter(|l| !l.is_empty()).collect();
    assert_eq!(c.items, lines);
}
