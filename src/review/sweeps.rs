//! Two sweeps compared group by group: typically one folder under two models, or a folder
//! before and after a clean-up. For each group the suspect rate, the mean mark share and the
//! removal flip rate of each sweep, and the second minus the first with a 95 % interval.
//!
//! Counts follow the sweep's own groups.json (`sweep::summary`): an image without regions has a
//! mark share of 0 and does not flip. The intervals (`sweep::stats`):
//! - each sweep's rates: Wilson's score interval; each mean mark share: the percentile
//!   bootstrap;
//! - the difference, when both sweeps hold exactly the same images of the group (matched by
//!   path), is paired: for rates Newcombe's hybrid score interval for paired proportions
//!   (Newcombe 1998, Statistics in Medicine 17:2635, method 10), for the mean mark share the
//!   percentile bootstrap of the mean per-image difference (Efron; common practice), which keeps
//!   each image's pairing. Otherwise the groups are taken as independent
//!   samples: Newcombe's hybrid score interval for rates (Newcombe 1998, method 10) and the
//!   two-sample bootstrap for the mean mark share. Percentile bootstraps are rough for small
//!   groups: an interval of a few images says little either way.

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

use anyhow::{Context, Result, bail};
use serde::{Deserialize, Serialize};

// Only the sweep's data types and intervals (plain values, no files or pictures).
use crate::sweep::row::Row;
use crate::sweep::stats::{Interval, Paired, bootstrap_difference, bootstrap_mean, newcombe, newcombe_paired, wilson};

/// One figure in both sweeps and their difference (second − first).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Figure {
    pub first: Option<Interval>,
    pub second: Option<Interval>,
    pub difference: Option<Interval>,
    /// How the difference's interval was found.
    pub interval: String,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct GroupComparison {
    pub group: String,
    pub images_first: usize,
    pub images_second: usize,
    /// Images (by path) in both sweeps.
    pub paired: usize,
    pub suspect_first: usize,
    pub suspect_second: usize,
    pub suspect_rate: Figure,
    pub mark_share: Figure,
    pub flip_rate: Figure,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SweepComparison {
    /// Groups in name order; a group in only one sweep has no figures for the other.
    pub groups: Vec<GroupComparison>,
    /// All images together.
    pub overall: GroupComparison,
}

const PAIRED: &str = "paired: percentile bootstrap of the per-image differences";
const PAIRED_RATE: &str = "paired: Newcombe's hybrid score interval for paired proportions";

fn suspect(r: &Row) -> bool {
    r.suspect
}
fn flipped(r: &Row) -> bool {
    r.flipped() == Some(true)
}
fn share(r: &Row) -> f64 {
    r.mark_share.unwrap_or(0.0)
}

fn rate(a: &[&Row], b: &[&Row], pairs: Option<&[(&Row, &Row)]>, f: fn(&Row) -> bool) -> Figure {
    let count = |v: &[&Row]| v.iter().filter(|r| f(r)).count();
    let (ka, kb) = (count(a), count(b));
    let (difference, interval) = match pairs {
        Some(p) => {
            let cell = |x: bool, y: bool| p.iter().filter(|(r, s)| f(r) == x && f(s) == y).count();
            let t = Paired { both: cell(true, true), second_only: cell(false, true), first_only: cell(true, false), neither: cell(false, false) };
            (newcombe_paired(t), PAIRED_RATE.to_string())
        }
        None => (newcombe(kb, b.len(), ka, a.len()), "independent groups: Newcombe's hybrid score interval".to_string()),
    };
    Figure { first: wilson(ka, a.len()), second: wilson(kb, b.len()), difference, interval }
}

fn mean_share(a: &[&Row], b: &[&Row], pairs: Option<&[(&Row, &Row)]>, seed: u64) -> Figure {
    let sa: Vec<f64> = a.iter().map(|r| share(r)).collect();
    let sb: Vec<f64> = b.iter().map(|r| share(r)).collect();
    let (difference, interval) = match pairs {
        Some(p) => (bootstrap_mean(&p.iter().map(|(x, y)| share(y) - share(x)).collect::<Vec<_>>(), seed), PAIRED.to_string()),
        None => (bootstrap_difference(&sb, &sa, seed), "independent groups: two-sample percentile bootstrap".to_string()),
    };
    Figure { first: bootstrap_mean(&sa, seed), second: bootstrap_mean(&sb, seed + 1), difference, interval }
}

fn by_path<'a>(v: &[&'a Row]) -> BTreeMap<String, &'a Row> {
    v.iter().map(|r| (r.path.clone(), *r)).collect()
}

fn in_group<'a>(v: &'a [Row], g: &str) -> Vec<&'a Row> {
    v.iter().filter(|r| r.group == g).collect()
}

fn group(name: &str, a: &[&Row], b: &[&Row], seed: u64) -> GroupComparison {
    let (ma, mb) = (by_path(a), by_path(b));
    let pairs: Vec<(&Row, &Row)> = ma.iter().filter_map(|(p, x)| mb.get(p).map(|y| (*x, *y))).collect();
    // Paired only when both sweeps hold exactly the same images, each once.
    let same = ma.len() == a.len() && mb.len() == b.len() && pairs.len() == a.len() && pairs.len() == b.len() && !pairs.is_empty();
    let p = same.then_some(pairs.as_slice());
    GroupComparison {
        group: name.to_string(),
        images_first: a.len(),
        images_second: b.len(),
        paired: pairs.len(),
        suspect_first: a.iter().filter(|r| r.suspect).count(),
        suspect_second: b.iter().filter(|r| r.suspect).count(),
        suspect_rate: rate(a, b, p, suspect),
        mark_share: mean_share(a, b, p, seed + 10),
        flip_rate: rate(a, b, p, flipped),
    }
}

/// Compares two sweeps' rows group by group (seeded: the same rows give the same intervals).
pub fn compare(first: &[Row], second: &[Row]) -> SweepComparison {
    let names: BTreeSet<&str> = first.iter().chain(second).map(|r| r.group.as_str()).collect();
    let groups = names
        .iter()
        .enumerate()
        .map(|(i, g)| group(g, &in_group(first, g), &in_group(second, g), 2000 + 100 * i as u64))
        .collect();
    let (all1, all2): (Vec<&Row>, Vec<&Row>) = (first.iter().collect(), second.iter().collect());
    SweepComparison { groups, overall: group("all images", &all1, &all2, 1999) }
}

/// The rows of a sweep's output folder: its `sweep.jsonl`, one row per line.
pub fn read_rows(dir: &Path) -> Result<Vec<Row>> {
    let path = dir.join("sweep.jsonl");
    let text = std::fs::read_to_string(&path)
        .with_context(|| format!("cannot read {}: give the output folder of a sweep (it holds sweep.jsonl)", path.display()))?;
    let rows = text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty())
        .map(|(i, l)| serde_json::from_str(l).with_context(|| format!("line {} of {} is not a sweep row", i + 1, path.display())))
        .collect::<Result<Vec<Row>>>()?;
    if rows.is_empty() {
        bail!("{} holds no rows: the sweep read no image", path.display());
    }
    Ok(rows)
}
