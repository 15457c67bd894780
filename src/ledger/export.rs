//! The ledger as CSV, for spreadsheets and data-frame tools, and back.
//!
//! Columns, one row per image, sorted by image:
//!
//! | column | holds |
//! | --- | --- |
//! | `image` | the image's path relative to the ledger's root, with `/` |
//! | `verdict` | `clean`, `marked`, `unsure`, `exclude`, or empty for none |
//! | `note` | the note, as written (quoted when it holds a comma, a quote or a line break) |
//! | `drawn_regions` | the drawn regions as JSON text, in the shapes of `*.drawn.json`; empty for none |
//! | `image_width`, `image_height` | the size of the image the regions were drawn on; empty when none |
//! | `changed` | when the entry last changed (UTC, RFC 3339) |
//!
//! Importing merges row by row. A column the file lacks leaves that field of the ledger as it
//! is (only `image` is required); a row without a `changed` time counts as changed now. Where
//! a row and the ledger differ on an image, `--prefer` decides: `newer` (the default) takes the
//! one changed later, the file's on a tie; `csv` always takes the file's; `ledger` keeps the
//! ledger's. A row whose image ends up with nothing (no verdict, note or region) removes it.

use std::io::Write;
use std::path::Path;

use anyhow::{Context, Result, bail};

use super::{Entry, Ledger, Stamp, Verdict, key};
use crate::regions::drawn::DrawnShape;

/// The columns written, in order.
pub const COLUMNS: [&str; 7] = ["image", "verdict", "note", "drawn_regions", "image_width", "image_height", "changed"];

/// Writes the ledger as CSV.
pub fn write_csv(ledger: &Ledger, out: impl Write) -> Result<()> {
    let mut w = csv::Writer::from_writer(out);
    w.write_record(COLUMNS)?;
    for (k, e) in ledger.entries() {
        let drawn = if e.drawn.is_empty() { String::new() } else { serde_json::to_string(&e.drawn)? };
        let [iw, ih] = e.image_size.map_or([String::new(), String::new()], |s| s.map(|v| v.to_string()));
        let verdict = e.verdict.map_or("", Verdict::name);
        w.write_record([k.as_str(), verdict, &e.note, &drawn, &iw, &ih, &e.changed.to_string()])?;
    }
    w.flush()?;
    Ok(())
}

/// One row of an imported CSV: `None` for a field whose column the file lacks.
#[derive(Clone, Debug, PartialEq)]
pub struct CsvRow {
    pub image: String,
    pub verdict: Option<Option<Verdict>>,
    pub note: Option<String>,
    pub drawn: Option<(Vec<DrawnShape>, Option<[usize; 2]>)>,
    pub changed: Option<Stamp>,
    /// The row's line in the file, for messages.
    pub line: u64,
}

/// Reads and checks a ledger CSV; every error names the file, the line and the column.
pub fn read_csv(path: &Path) -> Result<Vec<CsvRow>> {
    let mut r = csv::ReaderBuilder::new()
        .from_path(path)
        .with_context(|| format!("cannot read the CSV {}", path.display()))?;
    let headers: Vec<String> = r
        .headers()
        .with_context(|| format!("cannot read the header line of {}", path.display()))?
        .iter()
        .map(|h| h.trim_start_matches('\u{feff}').trim().to_ascii_lowercase())
        .collect();
    let col = |name: &str| headers.iter().position(|h| h == name);
    let Some(image_col) = col("image") else {
        bail!(
            "{} has no `image` column; its columns are: {}. A ledger CSV has the columns {}",
            path.display(),
            headers.join(", "),
            COLUMNS.join(", ")
        );
    };
    let (verdict_col, note_col, drawn_col, changed_col) = (col("verdict"), col("note"), col("drawn_regions"), col("changed"));
    let (w_col, h_col) = (col("image_width"), col("image_height"));
    let mut rows = Vec::new();
    let mut seen = std::collections::HashMap::new();
    for rec in r.records() {
        let rec = rec.with_context(|| format!("{} is not valid CSV", path.display()))?;
        let line = rec.position().map_or(0, |p| p.line());
        let at = |c: &str| format!("{} line {line}, column `{c}`", path.display());
        let field = |i: Option<usize>| i.map(|i| rec.get(i).unwrap_or("").to_string());
        let image = field(Some(image_col)).unwrap_or_default();
        key::validate(&image).with_context(|| at("image"))?;
        if let Some(first) = seen.insert(image.clone(), line) {
            bail!("{}: {image} is on line {first} too; give each image once", at("image"));
        }
        let verdict = field(verdict_col).map(|v| Verdict::parse(&v)).transpose().with_context(|| at("verdict"))?;
        let size = match (field(w_col), field(h_col)) {
            (Some(w), Some(h)) if !w.trim().is_empty() || !h.trim().is_empty() => {
                let n = |t: &str, c: &str| t.trim().parse::<usize>().ok().filter(|v| *v > 0).with_context(|| format!("{}: \"{t}\" is not a size in pixels", at(c)));
                Some([n(&w, "image_width")?, n(&h, "image_height")?])
            }
            _ => None,
        };
        let drawn = match field(drawn_col) {
            None => None,
            Some(t) if t.trim().is_empty() => Some((Vec::new(), None)),
            Some(t) => {
                let shapes: Vec<DrawnShape> = serde_json::from_str(&t).with_context(|| {
                    format!("{}: not a JSON list of drawn regions (e.g. [{{\"label\": \"tag\", \"shape\": \"rect\", \"box\": [0, 0, 10, 10]}}])", at("drawn_regions"))
                })?;
                for (i, s) in shapes.iter().enumerate() {
                    s.shape.check().with_context(|| format!("{}: drawn region {i}", at("drawn_regions")))?;
                }
                Some((shapes, size))
            }
        };
        let changed = match field(changed_col) {
            Some(t) if !t.trim().is_empty() => Some(Stamp::parse(&t).with_context(|| at("changed"))?),
            _ => None,
        };
        rows.push(CsvRow { image, verdict, note: field(note_col), drawn, changed, line });
    }
    Ok(rows)
}

/// Which side wins where a CSV row and the ledger differ.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Prefer {
    /// The one changed later (the file's on a tie).
    Newer,
    /// The file's.
    Csv,
    /// The ledger's.
    Ledger,
}

impl Prefer {
    pub fn parse(s: &str) -> Result<Prefer> {
        Ok(match s {
            "newer" => Prefer::Newer,
            "csv" => Prefer::Csv,
            "ledger" => Prefer::Ledger,
            _ => bail!("--prefer {s}: use newer, csv or ledger"),
        })
    }
}

/// What an import did, image by image.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Import {
    pub added: Vec<String>,
    pub replaced: Vec<String>,
    pub removed: Vec<String>,
    /// Rows that differed but lost to the ledger's entry.
    pub kept: Vec<String>,
    pub unchanged: usize,
}

/// Merges `rows` into `ledger` (see the module's rule). `now` stamps rows without a time.
pub fn import_rows(ledger: &mut Ledger, rows: &[CsvRow], prefer: Prefer, now: Stamp) -> Import {
    let mut out = Import::default();
    for row in rows {
        let old = ledger.entry(&row.image).cloned();
        let mut new = old.clone().unwrap_or_else(|| Entry::empty(now));
        if let Some(v) = row.verdict {
            new.verdict = v;
        }
        if let Some(n) = &row.note {
            new.note = n.clone();
        }
        if let Some((shapes, size)) = &row.drawn {
            new.drawn = shapes.clone();
            new.image_size = if shapes.is_empty() { None } else { *size };
        }
        new.changed = row.changed.unwrap_or(now);
        let take = match &old {
            None if new.is_empty() => {
                out.unchanged += 1;
                continue;
            }
            None => true,
            Some(o) if o.same_content(&new) => {
                out.unchanged += 1;
                continue;
            }
            Some(o) => match prefer {
                Prefer::Csv => true,
                Prefer::Ledger => false,
                Prefer::Newer => new.changed >= o.changed,
            },
        };
        if !take {
            out.kept.push(row.image.clone());
            continue;
        }
        let list = match (&old, new.is_empty()) {
            (_, true) => &mut out.removed,
            (None, false) => &mut out.added,
            (Some(_), false) => &mut out.replaced,
        };
        list.push(row.image.clone());
        ledger.put(row.image.clone(), new);
    }
    out
}
