//! The files `spurion clean --check` writes into the cleaned copy: `spurion-check.json` (the
//! whole [`CheckResult`], one line per image included) and `spurion-check.txt`, a short table
//! for people, which is also what the terminal shows.

use std::path::Path;

use anyhow::{Context, Result};
use serde_json::json;

use crate::clean::check::{CheckResult, GroupCheck};
use crate::clean::store::{CHECK_JSON, CHECK_TEXT, write_durably};
use crate::sweep::stats::Interval;

fn pct(i: &Option<Interval>) -> String {
    match i {
        Some(i) => format!("{:.1} % ({:.1}–{:.1})", 100.0 * i.estimate, 100.0 * i.low, 100.0 * i.high),
        None => "—".into(),
    }
}

fn points(i: &Option<Interval>) -> String {
    match i {
        Some(i) => format!("{:+.1} ({:+.1} to {:+.1})", 100.0 * i.estimate, 100.0 * i.low, 100.0 * i.high),
        None => "—".into(),
    }
}

fn line(g: &GroupCheck, wide: usize) -> String {
    format!(
        "{:<wide$}  {:>6}  {:>7}  {:>22}  {:>22}  {:>22}  {:>24}",
        g.group,
        g.images,
        g.cleaned,
        pct(&g.changed_share),
        pct(&g.accuracy_before),
        pct(&g.accuracy_after),
        points(&g.accuracy_change)
    )
}

/// The table for people.
pub fn check_text(r: &CheckResult) -> String {
    let wide = r.groups.iter().map(|g| g.group.len()).max().unwrap_or(5).max(5);
    let mut t = format!("model {} (sha256 {}) on the originals and on the cleaned copy\n", r.model, &r.model_sha256[..12.min(r.model_sha256.len())]);
    t.push_str(&format!(
        "{:<wide$}  {:>6}  {:>7}  {:>22}  {:>22}  {:>22}  {:>24}\n",
        "group", "images", "cleaned", "predictions changed", "accuracy before", "accuracy after", "change, points"
    ));
    for g in &r.groups {
        t.push_str(&line(g, wide));
        t.push('\n');
    }
    t.push_str(&line(&r.all, wide));
    t.push('\n');
    match &r.labels_from {
        Some(l) => t.push_str(&format!("labels from {l}; ")),
        None => t.push_str("no labels given (--labels FILE:COLUMN): accuracy not computed; "),
    }
    t.push_str(
        "95 % intervals in brackets: Wilson for shares and accuracies, Newcombe's paired interval for the change.\n\
         A change in accuracy after painting marks out measures how much of the model's performance came from them on these images; \
         it is not evidence about any other data.\n",
    );
    t
}

/// Writes both files into the cleaned copy `out`.
pub fn write_check(out: &Path, r: &CheckResult) -> Result<String> {
    let text = check_text(r);
    let json = json!({ "format": "spurion-check", "version": 1, "check": r, "caution": crate::CAUTION });
    write_durably(&out.join(CHECK_JSON), serde_json::to_string_pretty(&json)?.as_bytes()).with_context(|| format!("cannot write {CHECK_JSON} in {}", out.display()))?;
    write_durably(&out.join(CHECK_TEXT), format!("{text}\n{}\n", crate::CAUTION).as_bytes()).with_context(|| format!("cannot write {CHECK_TEXT} in {}", out.display()))?;
    Ok(text)
}
