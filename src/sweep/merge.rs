//! Joining the shards of one sweep into the result an unsharded run gives.

use std::collections::BTreeMap;
use std::path::PathBuf;

use anyhow::{Result, bail};

use super::plan::Shard;
use super::row::Row;
use super::run::{RANKED, ShardResult, ranking};

/// Joins the shards of one sweep (each 1..N exactly once, all with the same settings and images
/// folder; `dirs` names where each came from, for the errors).
pub fn merge(parts: Vec<ShardResult>, dirs: &[PathBuf]) -> Result<ShardResult> {
    let Some(first) = parts.first() else { bail!("give the output folders of the shards to merge") };
    let n = first.shard.count;
    let mut seen = vec![false; n];
    for (p, d) in parts.iter().zip(dirs) {
        if p.settings != first.settings || p.images_root != first.images_root {
            bail!(
                "{} is a shard of another sweep than {} (other settings or images folder); merge the shards of one sweep",
                d.display(),
                dirs[0].display()
            );
        }
        if p.shard.count != n {
            bail!("{} is shard {}/{}, but {} is of {n} shards", d.display(), p.shard.index, p.shard.count, dirs[0].display());
        }
        if std::mem::replace(&mut seen[p.shard.index - 1], true) {
            bail!("shard {}/{n} is given twice (again as {})", p.shard.index, d.display());
        }
    }
    let missing: Vec<String> = (1..=n).filter(|k| !seen[k - 1]).map(|k| format!("{k}/{n}")).collect();
    if !missing.is_empty() {
        bail!("shard(s) {} are missing; run them (or give their folders) before merging", missing.join(", "));
    }
    let mut out = ShardResult {
        settings: first.settings.clone(),
        images_root: first.images_root.clone(),
        shard: Shard::ALL,
        rows: vec![],
        skipped: vec![],
        atlas: BTreeMap::new(),
        computed: 0,
        cached: 0,
        ranked_maps: BTreeMap::new(),
        thumbs: BTreeMap::new(),
        feed: first.feed.clone(),
    };
    for p in parts {
        out.thumbs.extend(p.thumbs);
        out.ranked_maps.extend(p.ranked_maps);
        out.rows.extend(p.rows);
        out.skipped.extend(p.skipped);
        out.computed += p.computed;
        out.cached += p.cached;
        for (g, a) in p.atlas {
            match out.atlas.get_mut(&g) {
                Some(s) => s.merge(&a),
                None => {
                    out.atlas.insert(g, a);
                }
            }
        }
    }
    out.rows.sort_by(|a, b| a.path.cmp(&b.path));
    out.skipped.sort_by(|a, b| a.path.cmp(&b.path));
    // The sweep's ranked images are among the shards' own (each keeps its top ones).
    let mut ranked: Vec<&Row> = out.rows.iter().collect();
    ranked.sort_by(|a, b| ranking(a, b));
    let keep: std::collections::BTreeSet<String> = ranked.iter().take(RANKED).map(|r| r.path.clone()).collect();
    out.thumbs.retain(|p, _| keep.contains(p));
    out.ranked_maps.retain(|p, _| keep.contains(p));
    Ok(out)
}
