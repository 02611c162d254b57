//! Plumbing shared by the test groups: a temp folder that runs the `waymark` binary in it,
//! the bundled data and the word list, indexes built from a list of items, JSON Lines
//! output, and the index file's section table.

use std::ops::Range;
use std::path::{Path, PathBuf};

use assert_cmd::Command;
use waymark::index::{build_index, BuildOptions, Index};
use waymark::ingest::{Corpus, Ids};

// ---------------------------------------------------------------------------------------
// The binary and a temp folder to run it in.

/// The `waymark` binary of this build, run in the current folder.
pub fn waymark() -> Command {
    Command::cargo_bin("waymark").expect("binary")
}

/// Path of the `waymark` binary, for running it from a shell line.
pub fn waymark_path() -> PathBuf {
    assert_cmd::cargo::cargo_bin("waymark")
}

/// A temp folder (removed when dropped) with helpers to write files and run the binary in it.
pub struct Dir {
    pub dir: tempfile::TempDir,
}

impl Dir {
    pub fn new() -> Dir {
        Dir {
            dir: tempfile::tempdir().expect("temp dir"),
        }
    }

    /// `name` inside the folder.
    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// Writes `bytes` to `name` inside the folder; returns its path.
    pub fn write(&self, name: &str, bytes: &[u8]) -> PathBuf {
        let p = self.path(name);
        std::fs::write(&p, bytes).expect("write");
        p
    }

    /// The binary, run in the folder.
    pub fn cmd(&self) -> Command {
        let mut c = waymark();
        c.current_dir(self.dir.path());
        c
    }

    /// `waymark build INPUT -o OUT EXTRA…` in the folder, which must succeed; returns the
    /// index's path.
    pub fn build(&self, input: &Path, out: &str, extra: &[&str]) -> PathBuf {
        let out = self.path(out);
        self.cmd()
            .arg("build")
            .arg(input)
            .arg("-o")
            .arg(&out)
            .args(extra)
            .assert()
            .success();
        out
    }

    /// Names in the folder other than the ones given: leftovers of a failed build.
    pub fn others(&self, keep: &[&str]) -> Vec<String> {
        std::fs::read_dir(self.dir.path())
            .expect("list")
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| !keep.contains(&n.as_str()))
            .collect()
    }
}

/// One JSON value per line of a command's standard output.
pub fn json_lines<T: serde::de::DeserializeOwned>(stdout: &[u8]) -> Vec<T> {
    std::str::from_utf8(stdout)
        .expect("utf-8")
        .lines()
        .map(|l| serde_json::from_str(l).expect("one JSON object per line"))
        .collect()
}

// ---------------------------------------------------------------------------------------
// Data files.

/// A file of the repository (`demo-data/…`, `examples/…`), by its path from the root.
pub fn repo_file(path: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(path)
}

/// A file of the bundled demo data (`demo-data/NAME`).
pub fn demo(name: &str) -> PathBuf {
    repo_file("demo-data").join(name)
}

/// The lines of a demo data file.
pub fn demo_lines(name: &str) -> Vec<String> {
    std::fs::read_to_string(demo(name))
        .expect("demo data")
        .lines()
        .map(str::to_string)
        .collect()
}

/// Debian's wamerican word list (package wamerican 2020.12.07-2: 104,334 words), open data
/// the tests check against. `scripts/test-data.sh` installs it when it is missing.
pub const WORD_LIST: &str = "/usr/share/dict/american-english";

/// The word list's path; a missing list fails the test with the command that installs it.
pub fn word_list_path() -> &'static Path {
    let path = Path::new(WORD_LIST);
    assert!(
        path.is_file(),
        "{WORD_LIST} is missing: run scripts/test-data.sh (it installs Debian's wamerican \
         with apt-get)"
    );
    path
}

/// The word list as text, one word a line.
pub fn word_list() -> String {
    std::fs::read_to_string(word_list_path()).expect("the word list reads as UTF-8")
}

/// The first `n` words of the word list.
pub fn first_words(n: usize) -> Vec<String> {
    word_list().lines().take(n).map(str::to_string).collect()
}

// ---------------------------------------------------------------------------------------
// Indexes built through the library.

/// `items` as a corpus read from a file without blank records: ids are the record numbers.
pub fn corpus(items: &[String]) -> Corpus {
    Corpus {
        items: items.to_vec(),
        keys: None,
        ids: Ids::Int((0..items.len() as i64).collect()),
        blank_skipped: 0,
        records: items.len(),
    }
}

/// `items` with the text ids `ids`, one per item.
pub fn corpus_with_ids(items: &[String], ids: Vec<String>) -> Corpus {
    Corpus {
        ids: Ids::Text(ids),
        ..corpus(items)
    }
}

/// Builds `corpus` with `opts` into `dir/file` and opens it.
pub fn build_in(dir: &Path, file: &str, corpus: &Corpus, opts: &BuildOptions) -> Index {
    let path = dir.join(file);
    build_index(corpus, "test", opts, &path, &|_| {}).expect("build");
    Index::open(&path).expect("open")
}

// ---------------------------------------------------------------------------------------
// The index file's section table (DEVELOPERS.md, "The index file"): a 64-byte header, then
// 16 table entries of 32 bytes (kind u32, flags u32, offset u64, length u64, CRC-32 u32,
// zero). The header holds the entry count at byte 12, the table's CRC-32 at 24 and its own
// at 28 (computed with those 4 bytes zero).

pub const HEADER: usize = 64;
pub const ENTRY: usize = 32;
pub const ENTRIES: usize = 16;

pub fn u32_at(b: &[u8], at: usize) -> u32 {
    u32::from_le_bytes(b[at..at + 4].try_into().unwrap())
}

pub fn u64_at(b: &[u8], at: usize) -> u64 {
    u64::from_le_bytes(b[at..at + 8].try_into().unwrap())
}

/// Offset of the section-table entry of `kind` (its length is at +16, its CRC at +24).
pub fn entry(bytes: &[u8], kind: u32) -> usize {
    (0..ENTRIES)
        .map(|e| HEADER + e * ENTRY)
        .find(|&at| u32_at(bytes, at) == kind)
        .unwrap_or_else(|| panic!("no section {kind}"))
}

/// Byte range of the section of `kind` (1 = meta, 10 = kd-tree, 12 = cells; see
/// DEVELOPERS.md).
pub fn section(bytes: &[u8], kind: u32) -> Range<usize> {
    let at = entry(bytes, kind);
    let off = u64_at(bytes, at + 8) as usize;
    let len = u64_at(bytes, at + 16) as usize;
    off..off + len
}

/// Recomputes every checksum of a (mutated) index, as someone crafting a file would: the
/// sections' CRC-32s in the table, then the table's and the header's.
pub fn fix_checksums(bytes: &mut [u8]) {
    if bytes.len() < HEADER + ENTRIES * ENTRY {
        return;
    }
    let count = u32_at(bytes, 12) as usize;
    for e in 0..count.min(ENTRIES) {
        let at = HEADER + e * ENTRY;
        let off = u64_at(bytes, at + 8) as usize;
        let len = u64_at(bytes, at + 16) as usize;
        if let Some(s) = off.checked_add(len).and_then(|end| bytes.get(off..end)) {
            let crc = crc32fast::hash(s);
            bytes[at + 24..at + 28].copy_from_slice(&crc.to_le_bytes());
        }
    }
    fix_table_checksums(bytes);
}

/// Recomputes the table's and the header's CRC-32s (not the sections').
pub fn fix_table_checksums(bytes: &mut [u8]) {
    let table = crc32fast::hash(&bytes[HEADER..HEADER + ENTRIES * ENTRY]);
    bytes[24..28].copy_from_slice(&table.to_le_bytes());
    bytes[28..32].fill(0);
    let header = crc32fast::hash(&bytes[..HEADER]);
    bytes[28..32].copy_from_slice(&header.to_le_bytes());
}
