//! `waymark install NEW INDEX`: replace an index atomically with a file built elsewhere.

use std::io::Write;

use super::args::InstallArgs;
use crate::index::install_index;

pub(super) fn install(a: InstallArgs) -> anyhow::Result<()> {
    let bytes = install_index(&a.new, &a.index)?;
    if !a.quiet {
        writeln!(
            std::io::stdout().lock(),
            "installed {} as {} ({:.1} MB, every checksum verified)",
            a.new.display(),
            a.index.display(),
            bytes as f64 / 1e6
        )?;
    }
    Ok(())
}
