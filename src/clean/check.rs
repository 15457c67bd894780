//! What the model does without its marks: the model run on each original and its cleaned copy,
//! and per group the share of predictions that change and, where labels are given, accuracy
//! before and after, each with a 95 % interval.
//!
//! - Shares and accuracies: Wilson's score interval ([`crate::sweep::stats::wilson`]).
//! - The change in accuracy (after − before) on the same images: Newcombe's interval for the
//!   difference of paired proportions (Newcombe 1998, "Improved confidence intervals for the
//!   difference between binomial proportions based on paired data", Statistics in Medicine
//!   17:2635–2650, method 10: the two Wilson intervals combined with the correlation φ of the
//!   paired outcomes; the formula recalled from memory, and tested here for its coverage).

use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use rayon::prelude::*;
use serde::Serialize;

use crate::control::Control;
use crate::feed::{FeedCard, OpenOptions, Picture};
use crate::methods::{Input, top_index};
use crate::model::{Model, Tap};
use crate::sweep::stats::{self, Interval, Paired, wilson};
use crate::sweep::{Exclude, Groups, Shard, plan};

/// Newcombe's method-10 interval for p₂ − p₁ of paired binary outcomes: `both` right before and
/// after, `lost` right before only, `gained` right after only, `neither`. The sweep's
/// [`stats::newcombe_paired`], whose tests check it on Newcombe's worked examples.
pub fn newcombe_paired(both: usize, lost: usize, gained: usize, neither: usize) -> Option<Interval> {
    stats::newcombe_paired(Paired { both, second_only: gained, first_only: lost, neither })
}

/// One group's figures.
#[derive(Clone, Debug, Serialize)]
pub struct GroupCheck {
    pub group: String,
    pub images: usize,
    /// Images of the group that the cleaning painted.
    pub cleaned: usize,
    /// Images whose top class differs between original and cleaned copy.
    pub changed: usize,
    pub changed_share: Option<Interval>,
    /// Images with a label.
    pub labelled: usize,
    pub correct_before: usize,
    pub correct_after: usize,
    pub accuracy_before: Option<Interval>,
    pub accuracy_after: Option<Interval>,
    /// accuracy after − before, paired.
    pub accuracy_change: Option<Interval>,
}

/// One image: its top class on the original and the cleaned copy, and its label.
#[derive(Clone, Debug, Serialize)]
pub struct ImageCheck {
    pub file: String,
    pub group: String,
    pub cleaned: bool,
    pub top_before: usize,
    pub top_after: usize,
    pub label: Option<usize>,
}

/// The whole check.
#[derive(Clone, Debug, Serialize)]
pub struct CheckResult {
    pub model: String,
    pub model_sha256: String,
    pub labels_from: Option<String>,
    pub groups: Vec<GroupCheck>,
    pub all: GroupCheck,
    pub images: Vec<ImageCheck>,
}

/// What the check needs besides the two folders.
pub struct CheckSetup<'a> {
    pub model: &'a Model,
    pub card: &'a FeedCard,
    pub open: OpenOptions,
    pub groups: Groups,
    pub exclude: Vec<String>,
    /// A CSV and its label column (label text as the feed card names it, or a class index),
    /// whose `file` or `path` column names each image as the groups manifest does.
    pub labels: Option<(PathBuf, String)>,
}

fn label_index(text: &str, card: &FeedCard) -> Option<usize> {
    let t = text.trim();
    card.output.labels.iter().position(|l| l == t).or_else(|| t.parse().ok())
}

fn summarise(group: &str, rows: &[&ImageCheck]) -> GroupCheck {
    let changed = rows.iter().filter(|r| r.top_before != r.top_after).count();
    let lab: Vec<(&ImageCheck, usize)> = rows.iter().filter_map(|r| r.label.map(|l| (*r, l))).collect();
    let cell = |b: bool, a: bool| lab.iter().filter(|(r, l)| (r.top_before == *l) == b && (r.top_after == *l) == a).count();
    let (both, lost, gained, neither) = (cell(true, true), cell(true, false), cell(false, true), cell(false, false));
    GroupCheck {
        group: group.to_string(),
        images: rows.len(),
        cleaned: rows.iter().filter(|r| r.cleaned).count(),
        changed,
        changed_share: wilson(changed, rows.len()),
        labelled: lab.len(),
        correct_before: both + lost,
        correct_after: both + gained,
        accuracy_before: wilson(both + lost, lab.len()),
        accuracy_after: wilson(both + gained, lab.len()),
        accuracy_change: newcombe_paired(both, lost, gained, neither),
    }
}

/// Runs the model on every image of `original` and its namesake in `cleaned`. `painted`: the
/// files (relative paths) the cleaning painted. One unit of progress per image.
pub fn check(setup: &CheckSetup<'_>, original: &Path, cleaned: &Path, painted: &(dyn Fn(&str) -> bool + Sync), ctl: &Control) -> Result<CheckResult> {
    let exclude = Exclude::new(&setup.exclude)?;
    let items = plan(original, &setup.groups, &exclude, Shard::ALL)?;
    if items.is_empty() {
        bail!("{} holds no image to check", original.display());
    }
    let labels: Option<HashMap<String, String>> = match &setup.labels {
        Some((file, column)) => Some(crate::sweep::plan::read_groups(file, column, original)?),
        None => None,
    };
    ctl.begin(items.len() as u64);
    let top = |p: &Path| -> Result<usize> {
        let pic = Picture::open_with(p, &setup.open)?;
        let x = Input::picture(pic, setup.card)?.model_tensor()?;
        Ok(top_index(&setup.model.forward(&x, Tap::Output)?))
    };
    let images = items
        .par_iter()
        .map(|it| -> Result<ImageCheck> {
            ctl.check()?;
            let copy = it.rel.split('/').fold(cleaned.to_path_buf(), |p, part| p.join(part));
            if !copy.is_file() {
                bail!("{} has no cleaned copy at {}: run the cleaning into that folder first", it.rel, copy.display());
            }
            let label = match labels.as_ref().and_then(|m| m.get(&it.rel)) {
                Some(t) => Some(label_index(t, setup.card).with_context(|| {
                    format!("the label \"{t}\" of {} is neither one of the model's labels ({}) nor a class number", it.rel, setup.card.output.labels.join(", "))
                })?),
                None => None,
            };
            let r = ImageCheck {
                file: it.rel.clone(),
                group: it.group.clone(),
                cleaned: painted(&it.rel),
                top_before: top(&it.path).with_context(|| format!("running the model on {}", it.path.display()))?,
                top_after: top(&copy).with_context(|| format!("running the model on {}", copy.display()))?,
                label,
            };
            ctl.advance(1);
            Ok(r)
        })
        .collect::<Result<Vec<_>>>()?;
    let mut by_group: BTreeMap<&str, Vec<&ImageCheck>> = BTreeMap::new();
    for r in &images {
        by_group.entry(r.group.as_str()).or_default().push(r);
    }
    let groups = by_group.iter().map(|(g, rows)| summarise(g, rows)).collect();
    let all = summarise("(all)", &images.iter().collect::<Vec<_>>());
    Ok(CheckResult {
        model: setup.model.path().file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default(),
        model_sha256: setup.model.sha256().to_string(),
        labels_from: setup.labels.as_ref().map(|(f, c)| format!("{}:{c}", f.display())),
        groups,
        all,
        images,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    #[test]
    fn paired_interval_with_no_correlation_is_newcombes_unpaired_one() {
        // With φ = 0 (ad = bc) method 10 reduces to the square-root combination of the two
        // Wilson intervals, which is the unpaired hybrid score interval on the same counts.
        let (a, b, c, d) = (10, 10, 10, 10);
        let p = newcombe_paired(a, b, c, d).unwrap();
        let u = crate::sweep::stats::newcombe(a + c, 40, a + b, 40).unwrap();
        assert!((p.estimate - u.estimate).abs() < 1e-12 && (p.low - u.low).abs() < 1e-12 && (p.high - u.high).abs() < 1e-12, "{p:?} {u:?}");
    }

    #[test]
    fn paired_interval_covers_about_95_percent() {
        // Coverage by simulation (common practice for checking an interval): correlated pairs
        // with P(right before) = 0.8, P(right after) = 0.6, n = 80. Newcombe reports coverage
        // near the nominal for method 10; we ask 93–98 % over 3000 seeded trials.
        let mut rng = ChaCha8Rng::seed_from_u64(27);
        let (trials, n) = (3000, 80);
        let mut covered = 0;
        for _ in 0..trials {
            let mut cells = [0usize; 4];
            for _ in 0..n {
                let before = rng.random::<f64>() < 0.8;
                // After: mostly follows before (a model that loses some right answers).
                let after = if before { rng.random::<f64>() < 0.7 } else { rng.random::<f64>() < 0.2 };
                cells[match (before, after) {
                    (true, true) => 0,
                    (true, false) => 1,
                    (false, true) => 2,
                    (false, false) => 3,
                }] += 1;
            }
            let i = newcombe_paired(cells[0], cells[1], cells[2], cells[3]).unwrap();
            // True difference: P(after) − P(before) = 0.8·0.7 + 0.2·0.2 − 0.8 = −0.2.
            covered += (i.low <= -0.2 && -0.2 <= i.high) as usize;
        }
        let share = covered as f64 / trials as f64;
        assert!((0.93..=0.98).contains(&share), "coverage {share}");
    }

    #[test]
    fn paired_interval_is_narrower_than_unpaired_when_outcomes_agree() {
        // Strongly agreeing pairs (φ > 0) carry more information than two independent samples.
        let p = newcombe_paired(40, 5, 2, 13).unwrap();
        let u = crate::sweep::stats::newcombe(42, 60, 45, 60).unwrap();
        assert!(p.high - p.low < u.high - u.low, "{p:?} {u:?}");
        assert!(p.low < p.estimate && p.estimate < p.high);
    }
}
