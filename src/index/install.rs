//! Replacing an index in place, atomically, with a file built elsewhere.
//!
//! An index is read through a memory mapping: writing over the file (`cp NEW INDEX`)
//! changes the pages under every process that has it open, and truncating it makes their
//! next read of a page past the new end fail with SIGBUS. A new index must take the old
//! one's name by a rename on the same filesystem, which leaves the old file's pages to the
//! processes that mapped it. [`install_index`] does this for a file built elsewhere: it
//! copies it next to the destination, checks the copy whole, and renames it over the
//! destination.

use std::fs::File;
use std::path::Path;

use super::file::{file_id, partial_for, persist_partial};
use super::Index;
use crate::error::{Error, Result};

/// Replaces the index `dest` with a copy of the index file `source`, atomically: readers
/// that have `dest` open keep answering from the old file, and those that open it later get
/// the new one whole.
///
/// The copy is written to a locked temporary file in `dest`'s folder, flushed, opened as an
/// index and checked whole (every checksum and section, as `inspect --verify` does) before
/// it is renamed over `dest`; the folder is then flushed so that the rename survives a
/// crash. Refused, with `dest` untouched and no temporary file left: a `source` that is
/// `dest` itself (the same file by device and inode, through any name or link), that is not
/// a regular file, or that is not a valid index (the error names `source`); a `source` or a
/// `dest` that is an index in parts (a list file, [`super::parts`]), which cannot be
/// replaced by one rename: `waymark compact` makes it one file first. A temporary file
/// left by a process killed midway is removed by the next build or replacement of `dest`.
/// Returns the size of the new index in bytes.
///
/// ```no_run
/// use waymark::index::install_index;
///
/// // Built on another machine, copied to the server's disk, then put in place.
/// install_index("incoming/names.wmk".as_ref(), "live/names.wmk".as_ref())?;
/// # Ok::<(), waymark::Error>(())
/// ```
pub fn install_index(source: &Path, dest: &Path) -> Result<u64> {
    let io = |path: &Path| {
        let path = path.to_path_buf();
        move |source| Error::Io { path, source }
    };
    let not_regular = || Error::refused(source, "is not a regular file, not an index file");
    // The type is checked by name first, so that a FIFO is never opened (the open would
    // wait for a writer), and again on the file opened, which is what counts.
    if !std::fs::metadata(source).map_err(io(source))?.is_file() {
        return Err(not_regular());
    }
    let mut src = File::open(source).map_err(io(source))?;
    let meta = src.metadata().map_err(io(source))?;
    if !meta.is_file() {
        return Err(not_regular());
    }
    // An index in parts is a list file and a folder of parts: one rename cannot replace
    // both, so neither side may be one (`waymark compact` makes it one file).
    if super::parts::is_list(source)? {
        return Err(Error::Usage(format!(
            "{}: an index in parts (its list file) cannot be installed: its parts are in \
             another folder; run `waymark compact {}` first, then install it",
            source.display(),
            source.display()
        )));
    }
    if super::parts::is_list(dest)? {
        return Err(Error::Usage(format!(
            "{}: an index in parts (its list file): install replaces one index file and \
             would leave its parts folder behind; run `waymark compact {}` first, then \
             install over it",
            dest.display(),
            dest.display()
        )));
    }
    if std::fs::metadata(dest).is_ok_and(|d| file_id(&d) == file_id(&meta)) {
        return Err(Error::Usage(format!(
            "{}: the new index is the index it would replace ({}, the same file); \
             nothing to do",
            source.display(),
            dest.display()
        )));
    }
    let mut tmp = partial_for(dest)?;
    let copied = std::io::copy(&mut src, tmp.as_file_mut())
        .and_then(|n| tmp.as_file().sync_all().map(|()| n))
        .map_err(|e| Error::Io {
            path: dest.to_path_buf(),
            source: std::io::Error::new(
                e.kind(),
                format!(
                    "copying the new index failed ({e}); {} is untouched",
                    dest.display()
                ),
            ),
        })?;
    // The copy itself is checked, so a source changed or damaged while copying is caught.
    let checked = Index::open(tmp.path()).and_then(|index| index.verify());
    if let Err(e) = checked {
        return Err(naming(e, tmp.path(), source));
    }
    persist_partial(tmp, dest)?;
    Ok(copied)
}

/// `e` about the temporary copy `tmp`, told as about `source`, the file it was copied from.
fn naming(e: Error, tmp: &Path, source: &Path) -> Error {
    match e {
        Error::CorruptIndex { path, reason } if path == tmp => Error::CorruptIndex {
            path: source.to_path_buf(),
            reason,
        },
        Error::IndexRefused { path, reason } if path == tmp => Error::IndexRefused {
            path: source.to_path_buf(),
            reason,
        },
        Error::Io { path, source: s } if path == tmp => Error::Io {
            path: source.to_path_buf(),
            source: s,
        },
        other => other,
    }
}
