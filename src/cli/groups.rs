//! `waymark groups`: groups of near-duplicates from the exact pairs within a radius.

use std::io::{BufWriter, Write};
use std::time::Instant;

use anyhow::Context;

use super::args::{GroupFormat, GroupsArgs};
use super::output::{counting_bar, id_json, id_text, tsv_field};
use super::pairs::radius_of;
use crate::error::Error;
use crate::index::Index;
use crate::pairs::{group, JoinBy, SelfJoin};

pub(super) fn groups(a: GroupsArgs) -> anyhow::Result<()> {
    let Some(radius) = radius_of(a.within, a.within_fraction) else {
        return Err(Error::Usage(
            "groups needs --within R or --within-fraction F (how near duplicates are)".into(),
        )
        .into());
    };
    // An index in parts is read as one index of its live items (the compacted index's
    // answers; the output names items by id, never by number).
    let one = super::open_one(&a.index, a.quiet_metric)?;
    let index: &Index = &one;
    let t0 = Instant::now();
    let by = if a.no_variant_table {
        JoinBy::Columns
    } else {
        JoinBy::Auto
    };
    let mut join = SelfJoin::with(index, radius, by)?;
    let bar = counting_bar(index.len() as u64, "items", !a.quiet);
    let mut pairs = Vec::new();
    while let Some(batch) = join.next_batch() {
        pairs.extend(batch?);
        bar.set_position(join.done() as u64);
    }
    bar.finish_and_clear();
    let groups = group(index.len(), &pairs, a.grouping.into(), a.singletons);
    let stdout = std::io::stdout();
    let mut out = BufWriter::new(stdout.lock());
    let text = |i: u32| String::from_utf8_lossy(index.item(i as usize)).into_owned();
    for (g, members) in groups.iter().enumerate() {
        let number = g + 1;
        let size = members.members.len();
        match a.format {
            GroupFormat::Json => {
                let mut obj = serde_json::json!({
                    "group": number,
                    "size": size,
                    "ids": members.members.iter().map(|&i| id_json(index.id(i as usize))).collect::<Vec<_>>(),
                    "items": members.members.iter().map(|&i| text(i)).collect::<Vec<_>>(),
                });
                if let Some(c) = members.centre {
                    obj["centre"] = id_json(index.id(c as usize));
                }
                serde_json::to_writer(&mut out, &obj)?;
                out.write_all(b"\n")?;
            }
            GroupFormat::Tsv => {
                for &i in &members.members {
                    writeln!(
                        out,
                        "{number}\t{size}\t{}\t{}",
                        tsv_field(&id_text(index.id(i as usize))),
                        tsv_field(&text(i))
                    )?;
                }
            }
        }
    }
    out.flush().context("writing the groups")?;
    if a.summary {
        let in_groups: usize = groups.iter().map(|g| g.members.len()).sum();
        eprintln!(
            "{} groups holding {in_groups} of {} items, from {} pairs, in {:.3} s",
            groups.len(),
            index.len(),
            pairs.len(),
            t0.elapsed().as_secs_f64()
        );
    }
    Ok(())
}
