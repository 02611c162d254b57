//! The library's top-level modules import each other without a circle: each stage builds on
//! the ones below it (see the contributor guide's layering), so any module can be read and
//! changed knowing only what is under it.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

/// Every `.rs` file under `dir`.
fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).expect("src is readable") {
        let p = e.expect("entry").path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// `text` without `//` and `/* */` comments (string contents are kept; a `crate::` inside a
/// string would count, which no file of ours has).
fn strip_comments(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    let mut rest = text;
    while !rest.is_empty() {
        if let Some(r) = rest.strip_prefix("//") {
            rest = r.find('\n').map_or("", |i| &r[i..]);
        } else if let Some(r) = rest.strip_prefix("/*") {
            rest = r.find("*/").map_or("", |i| &r[i + 2..]);
        } else {
            let c = rest.chars().next().expect("non-empty");
            out.push(c);
            rest = &rest[c.len_utf8()..];
        }
    }
    out
}

/// The top-level modules a file names through `crate::NAME` or a `use crate::{A, B::…}`
/// group.
fn imports(code: &str) -> BTreeSet<String> {
    let ident = |s: &str| -> String {
        s.chars()
            .take_while(|c| c.is_alphanumeric() || *c == '_')
            .collect()
    };
    let mut found = BTreeSet::new();
    for (at, _) in code.match_indices("crate::") {
        let after = &code[at + "crate::".len()..];
        if let Some(group) = after.strip_prefix('{') {
            // Top-level heads of the group: names at brace depth 0.
            let mut depth = 0;
            let mut head = true;
            let mut i = 0;
            let bytes = group.as_bytes();
            while i < bytes.len() {
                match bytes[i] {
                    b'{' => depth += 1,
                    b'}' if depth == 0 => break,
                    b'}' => depth -= 1,
                    b',' if depth == 0 => head = true,
                    c if head && (c.is_ascii_alphabetic() || c == b'_') => {
                        found.insert(ident(&group[i..]));
                        head = false;
                    }
                    _ => {}
                }
                i += 1;
            }
        } else {
            let name = ident(after);
            if !name.is_empty() {
                found.insert(name);
            }
        }
    }
    found
}

#[test]
fn top_level_modules_import_each_other_without_a_circle() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    let mut modules: BTreeSet<String> = BTreeSet::new();
    let mut edges: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
    for f in &files {
        let rel = f.strip_prefix(&src).expect("under src");
        let first = rel.components().next().expect("a component");
        let name = first.as_os_str().to_string_lossy();
        let module = name.strip_suffix(".rs").unwrap_or(&name).to_string();
        if module == "lib" || module == "main" {
            continue;
        }
        modules.insert(module.clone());
        let code = strip_comments(&std::fs::read_to_string(f).expect("readable"));
        let to = edges.entry(module.clone()).or_default();
        to.extend(imports(&code).into_iter().filter(|m| *m != module));
    }
    for to in edges.values_mut() {
        to.retain(|m| modules.contains(m));
    }
    assert!(
        edges.get("search").is_some_and(|e| e.contains("index")),
        "the scanner finds the edges it must: {edges:?}"
    );
    // A circle exists iff some module reaches itself.
    for start in &modules {
        let mut seen = BTreeSet::new();
        let mut stack: Vec<&String> = edges[start].iter().collect();
        while let Some(m) = stack.pop() {
            assert_ne!(
                m, start,
                "{start} reaches itself through its imports: {edges:?}"
            );
            if seen.insert(m) {
                stack.extend(edges.get(m).into_iter().flatten());
            }
        }
    }
}

/// The scanner reads `use` groups and paths, and skips comments.
#[test]
fn the_import_scanner_reads_groups_and_paths() {
    let code = strip_comments(
        "use crate::{index::Index, metric::{A, B}, error};\n// crate::eval\nlet x = crate::coords::score;",
    );
    let got: Vec<String> = imports(&code).into_iter().collect();
    assert_eq!(got, ["coords", "error", "index", "metric"]);
}
