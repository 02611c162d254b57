//! The container format: a header, a section table and checksummed sections in one file.
//!
//! ```text
//! offset 0    header, 64 bytes
//!   0..8      magic  b"WAYMARK\0"
//!   8..12     format version, u32 LE
//!   12..16    number of sections, u32 LE
//!   16..24    total file length, u64 LE (catches truncation at open)
//!   24..28    CRC-32 of the section table
//!   28..32    CRC-32 of the header with this field zeroed
//!   32..64    zero
//! offset 64   section table, MAX_SECTIONS entries of 32 bytes
//!   kind u32, flags u32 (0), offset u64, length u64, CRC-32 u32, zero u32
//! then        sections, each starting on a 64-byte boundary, the kd-tree on a 4096-byte
//!             one (it is read in place and its archive needs 128-byte alignment), zero
//!             padding between them
//! ```
//!
//! All integers are little-endian. Writes go to a temporary file in the destination folder;
//! the header is written last, then the file is flushed to disk, renamed over the
//! destination and the folder is flushed: an interrupted build leaves the old index or none.
//!
//! The temporary file is `.NAME.XXXXXX.waymark-partial` (six random letters and digits) and
//! its writer holds an exclusive lock on it (`flock`) until it is renamed or removed. A
//! killed writer leaves the file but not the lock (the system drops it with the process), so
//! the next build to the same destination removes every such file that it can lock: only
//! files of writers that are gone, never one that a concurrent build is writing.

use std::fs::File;
use std::io::{Seek, SeekFrom, Write};
use std::ops::Range;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// Magic number at the start of every index file.
pub const MAGIC: &[u8; 8] = b"WAYMARK\0";
/// The format version this build writes.
pub const FORMAT_VERSION: u32 = 2;
/// The oldest format version this build reads (version 1: coordinates stored twice, ids
/// always stored, the kd-tree over every coordinate; see DEVELOPERS.md).
pub const OLDEST_FORMAT_VERSION: u32 = 1;
/// Size of the fixed header.
pub const HEADER_LEN: usize = 64;
/// Number of slots in the section table.
pub const MAX_SECTIONS: usize = 16;
const ENTRY_LEN: usize = 32;
const TABLE_LEN: usize = MAX_SECTIONS * ENTRY_LEN;
/// Alignment of every section.
pub const ALIGN: usize = 64;
/// Alignment of the kd-tree section (a page: more than its archive needs).
pub const TREE_ALIGN: usize = 4096;

/// The kinds of section an index holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[repr(u32)]
pub enum SectionKind {
    /// Build parameters and counts, as JSON.
    Meta = 1,
    /// `n + 1` u64 offsets into [`SectionKind::ItemBytes`].
    ItemOffsets = 2,
    /// The items as given (UTF-8), back to back.
    ItemBytes = 3,
    /// `n + 1` u64 offsets into [`SectionKind::KeyBytes`] (only when normalisation changes items).
    KeyOffsets = 4,
    /// The comparison forms of the items after normalisation.
    KeyBytes = 5,
    /// `n` i64 ids.
    IdInts = 6,
    /// `n + 1` u64 offsets into [`SectionKind::IdBytes`].
    IdOffsets = 7,
    /// Text ids, back to back.
    IdBytes = 8,
    /// `n × stride` u8 landmark coordinates in item order, saturated at 255 (format
    /// version 1 only; version 2 keeps the rows once, in the cells section).
    Coords = 9,
    /// The kd-tree over the f32 coordinates, as a zero-copy archive.
    Tree = 10,
    /// The graph of a graph-metric index, as an edge list (`a b weight` lines, UTF-8).
    Graph = 11,
    /// The items partitioned into cells by their coordinates, each cell's rows together
    /// (`index/cells.rs`); absent in version 1 files written before it existed. In version
    /// 2 its rows are the only copy of the coordinates.
    Cells = 12,
    /// `n` u32: the position of each item's row in the cells section (format version 2).
    Positions = 13,
    /// The deletion-variant table of small-radius range queries (`index/variants.rs`),
    /// only in indexes built with it (`--small-radius`).
    Variants = 14,
}

impl SectionKind {
    const ALL: [SectionKind; 14] = [
        SectionKind::Meta,
        SectionKind::ItemOffsets,
        SectionKind::ItemBytes,
        SectionKind::KeyOffsets,
        SectionKind::KeyBytes,
        SectionKind::IdInts,
        SectionKind::IdOffsets,
        SectionKind::IdBytes,
        SectionKind::Coords,
        SectionKind::Tree,
        SectionKind::Graph,
        SectionKind::Cells,
        SectionKind::Positions,
        SectionKind::Variants,
    ];

    fn from_u32(v: u32) -> Option<SectionKind> {
        SectionKind::ALL.into_iter().find(|k| *k as u32 == v)
    }

    /// The name shown by `inspect` and in errors.
    pub fn name(self) -> &'static str {
        match self {
            SectionKind::Meta => "meta",
            SectionKind::ItemOffsets => "item-offsets",
            SectionKind::ItemBytes => "items",
            SectionKind::KeyOffsets => "key-offsets",
            SectionKind::KeyBytes => "keys",
            SectionKind::IdInts => "ids",
            SectionKind::IdOffsets => "id-offsets",
            SectionKind::IdBytes => "id-text",
            SectionKind::Coords => "coordinates",
            SectionKind::Tree => "kd-tree",
            SectionKind::Graph => "graph",
            SectionKind::Cells => "cells",
            SectionKind::Positions => "positions",
            SectionKind::Variants => "deletion-variants",
        }
    }

    /// Sections checked at every open: the small metadata, and the graph, which every query
    /// of a graph index parses whole anyway.
    fn checked_at_open(self) -> bool {
        matches!(self, SectionKind::Meta | SectionKind::Graph)
    }
}

/// One entry of the section table.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Section {
    /// What the section holds.
    pub kind: SectionKind,
    /// Byte range in the file.
    pub range: Range<usize>,
    /// CRC-32 of its bytes.
    pub crc: u32,
}

/// Writes a container; nothing is visible at the destination until [`ContainerWriter::finish`].
pub struct ContainerWriter {
    dest: PathBuf,
    tmp: tempfile::NamedTempFile,
    pos: u64,
    sections: Vec<Section>,
}

fn io_err(path: &Path, source: std::io::Error) -> Error {
    Error::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// A failed write of the temporary file, reported against the index being written (the
/// temporary file is removed when the writer is dropped, so its name would only confuse).
fn write_err(dest: &Path, e: std::io::Error) -> Error {
    Error::Io {
        path: dest.to_path_buf(),
        source: std::io::Error::new(
            e.kind(),
            format!("writing the index failed ({e}); the previous file, if any, is untouched"),
        ),
    }
}

impl ContainerWriter {
    /// Starts writing an index that will replace `dest` when finished; refused when `dest`
    /// is one of `inputs` (the same file, see [`refuse_input_as_output`]).
    pub fn create(dest: &Path, inputs: &[PathBuf]) -> Result<ContainerWriter> {
        refuse_input_as_output(dest, inputs)?;
        let mut tmp = partial_for(dest)?;
        let reserved = vec![0u8; HEADER_LEN + TABLE_LEN];
        tmp.write_all(&reserved).map_err(|e| write_err(dest, e))?;
        Ok(ContainerWriter {
            dest: dest.to_path_buf(),
            tmp,
            pos: reserved.len() as u64,
            sections: Vec::new(),
        })
    }

    /// Appends a section on a 64-byte boundary.
    pub fn add(&mut self, kind: SectionKind, bytes: &[u8]) -> Result<()> {
        self.add_aligned(kind, bytes, ALIGN)
    }

    /// Appends a section on a boundary of `align` bytes (a power of two, at least 64).
    pub fn add_aligned(&mut self, kind: SectionKind, bytes: &[u8], align: usize) -> Result<()> {
        if self.sections.len() == MAX_SECTIONS {
            return Err(Error::Usage("too many sections in one index".into()));
        }
        let align = align.max(ALIGN) as u64;
        let pad = (align - self.pos % align) % align;
        let f = self.tmp.as_file_mut();
        f.write_all(&vec![0u8; pad as usize])
            .and_then(|_| f.write_all(bytes))
            .map_err(|e| write_err(&self.dest, e))?;
        let start = self.pos + pad;
        self.pos = start + bytes.len() as u64;
        self.sections.push(Section {
            kind,
            range: start as usize..self.pos as usize,
            crc: crc32fast::hash(bytes),
        });
        Ok(())
    }

    /// Writes the header and table, flushes, and renames the file into place.
    pub fn finish(mut self) -> Result<()> {
        let mut table = vec![0u8; TABLE_LEN];
        for (s, e) in self.sections.iter().zip(table.chunks_exact_mut(ENTRY_LEN)) {
            e[0..4].copy_from_slice(&(s.kind as u32).to_le_bytes());
            e[8..16].copy_from_slice(&(s.range.start as u64).to_le_bytes());
            e[16..24].copy_from_slice(&(s.range.len() as u64).to_le_bytes());
            e[24..28].copy_from_slice(&s.crc.to_le_bytes());
        }
        let mut header = [0u8; HEADER_LEN];
        header[0..8].copy_from_slice(MAGIC);
        header[8..12].copy_from_slice(&FORMAT_VERSION.to_le_bytes());
        header[12..16].copy_from_slice(&(self.sections.len() as u32).to_le_bytes());
        header[16..24].copy_from_slice(&self.pos.to_le_bytes());
        header[24..28].copy_from_slice(&crc32fast::hash(&table).to_le_bytes());
        let hcrc = crc32fast::hash(&header);
        header[28..32].copy_from_slice(&hcrc.to_le_bytes());

        let f = self.tmp.as_file_mut();
        f.seek(SeekFrom::Start(0))
            .and_then(|_| f.write_all(&header))
            .and_then(|_| f.write_all(&table))
            .and_then(|_| f.sync_all())
            .map_err(|e| write_err(&self.dest, e))?;
        persist_partial(self.tmp, &self.dest)
    }
}

/// The folder `dest` is written in, which must exist.
fn output_dir(dest: &Path) -> Result<PathBuf> {
    let dir = match dest.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !dir.is_dir() {
        let (kind, what) = if dir.exists() {
            (std::io::ErrorKind::NotADirectory, "is not a folder")
        } else {
            (
                std::io::ErrorKind::NotFound,
                "the output folder does not exist",
            )
        };
        return Err(Error::Io {
            path: dir,
            source: std::io::Error::new(kind, what),
        });
    }
    Ok(dir)
}

/// A new locked temporary file in `dest`'s folder that will replace `dest` (removed when
/// dropped unless persisted); the temporary files of dead writers of `dest` are removed.
pub(super) fn partial_for(dest: &Path) -> Result<tempfile::NamedTempFile> {
    let dir = output_dir(dest)?;
    let name = dest
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "index".into());
    let tmp = create_partial(&dir, &name)?;
    remove_stale_partials(&dir, &name, tmp.path());
    Ok(tmp)
}

/// Renames `tmp` over `dest` and flushes the folder, so that the rename survives a crash.
pub(super) fn persist_partial(tmp: tempfile::NamedTempFile, dest: &Path) -> Result<()> {
    tmp.persist(dest).map_err(|e| io_err(dest, e.error))?;
    if let Some(dir) = dest.parent() {
        let dir = if dir.as_os_str().is_empty() {
            Path::new(".")
        } else {
            dir
        };
        if let Ok(d) = File::open(dir) {
            d.sync_all().map_err(|e| io_err(dir, e))?;
        }
    }
    Ok(())
}

/// Random letters and digits in a temporary file's name (tempfile's default, made explicit
/// because [`partial_name_matches`] relies on it).
const PARTIAL_RAND: usize = 6;
const PARTIAL_SUFFIX: &str = ".waymark-partial";

/// Longest destination name written whole into a temporary file's name (which adds 24
/// bytes to it); a longer one is written as its digest, so that any valid name can be
/// written (a file name has at most 255 bytes).
const PARTIAL_TAG_MAX: usize = 200;

/// The part of a temporary file's name that names its destination: `dest_name` itself, or
/// for a name longer than [`PARTIAL_TAG_MAX`] bytes `~` and the first 16 hex digits of its
/// SHA-256.
fn partial_tag(dest_name: &str) -> String {
    if dest_name.len() <= PARTIAL_TAG_MAX {
        return dest_name.to_string();
    }
    use sha2::{Digest, Sha256};
    let h = Sha256::digest(dest_name.as_bytes());
    let hex: String = h[..8].iter().map(|b| format!("{b:02x}")).collect();
    format!("~{hex}")
}

/// Whether `file` is a temporary file of a build of `dest_name`:
/// `.DEST_NAME.XXXXXX.waymark-partial` with six ASCII letters or digits. The random part
/// has no dot, so the partial files of `a` and of `a.b` never match each other.
fn partial_name_matches(file: &str, dest_name: &str) -> bool {
    file.strip_prefix('.')
        .and_then(|f| f.strip_prefix(partial_tag(dest_name).as_str()))
        .and_then(|f| f.strip_prefix('.'))
        .and_then(|f| f.strip_suffix(PARTIAL_SUFFIX))
        .is_some_and(|r| r.len() == PARTIAL_RAND && r.bytes().all(|b| b.is_ascii_alphanumeric()))
}

/// Refuses an `output` that is one of `inputs`: the same file by device and inode, so also
/// under another name, through a symbolic link or a hard link. Writing it would destroy the
/// input. An output that does not exist yet, or an input that cannot be read, passes.
pub fn refuse_input_as_output(output: &Path, inputs: &[PathBuf]) -> Result<()> {
    let Ok(out) = std::fs::metadata(output) else {
        return Ok(());
    };
    let out = file_id(&out);
    for input in inputs {
        if std::fs::metadata(input).is_ok_and(|m| file_id(&m) == out) {
            return Err(Error::Usage(format!(
                "{}: the output is the input {} (the same file); writing it would destroy \
                 the input: choose another output",
                output.display(),
                input.display()
            )));
        }
    }
    Ok(())
}

/// Identity of a file on disk (device and inode).
pub(super) fn file_id(m: &std::fs::Metadata) -> (u64, u64) {
    use std::os::unix::fs::MetadataExt;
    (m.dev(), m.ino())
}

/// The permissions to create a file with that is renamed into place later: 0666, which the
/// kernel narrows by the process's umask (and a default ACL of the folder, if any) when it
/// creates the file, so the finished file gets what any new file would — 0644 under umask
/// 022 — rather than the 0600 of a temporary file, which the rename would keep.
///
/// Letting `open(2)` apply the umask is the only thread-safe way: reading the umask needs
/// `umask(2)`, which sets it too, and another thread creating a file between the read and
/// the restore would get the wrong mode. The partial file is readable under the same umask
/// as the finished one, and holds nothing the finished file does not.
pub(crate) fn new_file_permissions() -> std::fs::Permissions {
    use std::os::unix::fs::PermissionsExt;
    std::fs::Permissions::from_mode(0o666)
}

/// Creates the locked temporary file for a build of `dest_name` in `dir`.
///
/// The lock is taken after the file appears, so another build's cleanup can lock and remove
/// it in between; the writer then finds its name gone (or naming another file) and starts
/// over with a new one.
fn create_partial(dir: &Path, dest_name: &str) -> Result<tempfile::NamedTempFile> {
    let mut last = None;
    for _ in 0..8 {
        // The prefix marks the file as unfinished; its header stays zero until finish(),
        // so even a leftover temp file is refused by the reader.
        let tmp = tempfile::Builder::new()
            .prefix(&format!(".{}.", partial_tag(dest_name)))
            .suffix(PARTIAL_SUFFIX)
            .rand_bytes(PARTIAL_RAND)
            .permissions(new_file_permissions())
            .tempfile_in(dir)
            .map_err(|e| io_err(dir, e))?;
        tmp.as_file().lock().map_err(|e| io_err(tmp.path(), e))?;
        let ours = tmp
            .as_file()
            .metadata()
            .map_err(|e| io_err(tmp.path(), e))?;
        match std::fs::symlink_metadata(tmp.path()) {
            Ok(m) if file_id(&m) == file_id(&ours) => return Ok(tmp),
            Ok(_) => last = Some(std::io::ErrorKind::AlreadyExists),
            Err(e) => last = Some(e.kind()),
        }
        // Removed under us: forget the name (it is no longer ours) and try again.
        let _ = tmp.into_temp_path().keep();
    }
    Err(Error::Io {
        path: dir.to_path_buf(),
        source: std::io::Error::new(
            last.unwrap_or(std::io::ErrorKind::Other),
            "could not keep a temporary file in the output folder",
        ),
    })
}

/// Removes the temporary files of earlier builds of `dest_name` in `dir` whose writers are
/// gone (their lock can be taken), except `own`. Best effort: a file that cannot be read,
/// locked or removed is left alone, and no error stops the build.
fn remove_stale_partials(dir: &Path, dest_name: &str, own: &Path) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries.flatten() {
        let name = entry.file_name();
        let Some(name) = name.to_str() else {
            continue;
        };
        let path = entry.path();
        if !partial_name_matches(name, dest_name) || path == own {
            continue;
        }
        // Only plain files (a symlink is never followed), opened without writing.
        let Ok(meta) = std::fs::symlink_metadata(&path) else {
            continue;
        };
        if !meta.file_type().is_file() {
            continue;
        }
        let Ok(file) = File::open(&path) else {
            continue;
        };
        // A live writer holds the lock: WouldBlock, and the file stays.
        if file.try_lock().is_err() {
            continue;
        }
        // Still the file that was locked (not renamed into place or replaced meanwhile)?
        let same = match (file.metadata(), std::fs::symlink_metadata(&path)) {
            (Ok(a), Ok(b)) => file_id(&a) == file_id(&b),
            _ => false,
        };
        if same {
            let _ = std::fs::remove_file(&path);
        }
        drop(file);
    }
}

/// Reads and checks the header and section table of `bytes` (a whole index file); returns
/// the file's format version and its sections.
///
/// Checks the magic number, version (from [`OLDEST_FORMAT_VERSION`] to [`FORMAT_VERSION`]), recorded length, both checksums, that every section
/// lies inside the file on its alignment without overlapping another, that no kind appears
/// twice, and the checksum of the small sections. Large sections are checked by
/// [`verify_sections`] (`waymark inspect --verify`).
pub fn read_table(path: &Path, bytes: &[u8]) -> Result<(u32, Vec<Section>)> {
    let bad = |reason: String| Error::refused(path, reason);
    let corrupt = |reason: String| Error::corrupt(path, reason);
    if bytes.len() >= 8 && &bytes[0..8] == super::parts::LIST_MAGIC {
        return Err(bad(
            "an index in parts (its list file): this command reads one index file; run \
             `waymark compact` on it first"
                .into(),
        ));
    }
    if bytes.len() < 8 || &bytes[0..8] != MAGIC {
        return Err(bad(
            "not a waymark index (the file does not start with the waymark magic number)".into(),
        ));
    }
    if bytes.len() < HEADER_LEN + TABLE_LEN {
        return Err(bad(format!(
            "truncated index: {} bytes, shorter than its header",
            bytes.len()
        )));
    }
    let u32_at = |o: usize| u32::from_le_bytes(bytes[o..o + 4].try_into().expect("4 bytes"));
    let u64_at = |o: usize| u64::from_le_bytes(bytes[o..o + 8].try_into().expect("8 bytes"));
    let version = u32_at(8);
    if !(OLDEST_FORMAT_VERSION..=FORMAT_VERSION).contains(&version) {
        return Err(bad(format!(
            "index format version {version} is not supported: this waymark reads versions {OLDEST_FORMAT_VERSION} to {FORMAT_VERSION}; rebuild the index with `waymark build`"
        )));
    }
    let mut header = [0u8; HEADER_LEN];
    header.copy_from_slice(&bytes[..HEADER_LEN]);
    header[28..32].fill(0);
    if crc32fast::hash(&header) != u32_at(28) {
        return Err(corrupt("header checksum mismatch".into()));
    }
    let recorded = u64_at(16);
    if recorded != bytes.len() as u64 {
        return Err(bad(format!(
            "truncated or extended index: the header records {recorded} bytes, the file has {}",
            bytes.len()
        )));
    }
    let table = &bytes[HEADER_LEN..HEADER_LEN + TABLE_LEN];
    if crc32fast::hash(table) != u32_at(24) {
        return Err(corrupt("section table checksum mismatch".into()));
    }
    let count = u32_at(12) as usize;
    if count > MAX_SECTIONS {
        return Err(corrupt(format!("{count} sections recorded")));
    }
    let mut sections: Vec<Section> = Vec::with_capacity(count);
    for e in table.chunks_exact(ENTRY_LEN).take(count) {
        let raw = u32::from_le_bytes(e[0..4].try_into().expect("4 bytes"));
        let kind = SectionKind::from_u32(raw)
            .ok_or_else(|| corrupt(format!("unknown section kind {raw}")))?;
        let off = u64::from_le_bytes(e[8..16].try_into().expect("8 bytes"));
        let len = u64::from_le_bytes(e[16..24].try_into().expect("8 bytes"));
        let crc = u32::from_le_bytes(e[24..28].try_into().expect("4 bytes"));
        let end = off
            .checked_add(len)
            .filter(|&end| end <= bytes.len() as u64);
        let Some(end) = end else {
            return Err(corrupt(format!(
                "section {} lies outside the file",
                kind.name()
            )));
        };
        if off < (HEADER_LEN + TABLE_LEN) as u64 || off % ALIGN as u64 != 0 {
            return Err(corrupt(format!("section {} is misplaced", kind.name())));
        }
        if sections.iter().any(|s| s.kind == kind) {
            return Err(corrupt(format!("section {} appears twice", kind.name())));
        }
        let range = off as usize..end as usize;
        if sections
            .iter()
            .any(|s| s.range.start < range.end && range.start < s.range.end)
        {
            return Err(corrupt(format!("section {} overlaps another", kind.name())));
        }
        let s = Section { kind, range, crc };
        if kind.checked_at_open() {
            check_crc(path, bytes, &s)?;
        }
        sections.push(s);
    }
    Ok((version, sections))
}

fn check_crc(path: &Path, bytes: &[u8], s: &Section) -> Result<()> {
    if crc32fast::hash(&bytes[s.range.clone()]) != s.crc {
        return Err(Error::corrupt(
            path,
            format!("checksum mismatch in section {}", s.kind.name()),
        ));
    }
    Ok(())
}

/// Checks the checksum of every section (the full pass of `inspect --verify`).
///
/// Also checks that every byte outside the header, table and sections (the padding between
/// sections, and the unused table entries) is zero, so that no byte of a file goes unchecked.
pub fn verify_sections(path: &Path, bytes: &[u8], sections: &[Section]) -> Result<()> {
    sections
        .iter()
        .try_for_each(|s| check_crc(path, bytes, s))?;
    let mut ranges: Vec<Range<usize>> = sections.iter().map(|s| s.range.clone()).collect();
    ranges.sort_by_key(|r| r.start);
    let used_table = HEADER_LEN + sections.len() * ENTRY_LEN;
    let mut gaps: Vec<Range<usize>> = Vec::with_capacity(ranges.len() + 2);
    gaps.push(used_table..HEADER_LEN + TABLE_LEN);
    let mut at = HEADER_LEN + TABLE_LEN;
    for r in &ranges {
        gaps.push(at..r.start.max(at));
        at = at.max(r.end);
    }
    gaps.push(at..bytes.len());
    for g in gaps {
        if let Some(off) = bytes
            .get(g.clone())
            .and_then(|b| b.iter().position(|&x| x != 0))
        {
            return Err(Error::corrupt(
                path,
                format!(
                    "non-zero byte at offset {} outside every section",
                    g.start + off
                ),
            ));
        }
    }
    Ok(())
}
