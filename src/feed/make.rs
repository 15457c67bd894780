//! Making a feed card in one step: size, layout and channels read from the graph, the
//! normalisation from a named preset or given mean and std, labels from a text file; written
//! beside the model as `NAME.feed.toml`, never over an existing card unless asked.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};

use super::card::{FeedCard, Normalise, Resize};
use crate::model::Model;

/// The common normalisations a model is trained with.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Preset {
    /// ImageNet's per-channel mean and std on 0..1 pixels: mean 0.485, 0.456, 0.406; std 0.229,
    /// 0.224, 0.225 (common practice for networks trained on ImageNet; values from memory, as
    /// torchvision documents them).
    Imagenet,
    /// Pixels 0..1, no mean or std.
    Unit,
    /// Pixels −1..1: mean 0.5, std 0.5.
    SignedUnit,
    /// Each picture standardised by its own mean and standard deviation.
    PerImage,
}

impl Preset {
    pub const NAMES: [&'static str; 4] = ["imagenet", "unit", "signed-unit", "per-image"];
    pub const ALL: [Preset; 4] = [Preset::Imagenet, Preset::Unit, Preset::SignedUnit, Preset::PerImage];

    pub fn name(self) -> &'static str {
        Self::NAMES[self as usize]
    }

    pub fn parse(s: &str) -> Result<Preset> {
        Self::ALL
            .into_iter()
            .find(|p| p.name().eq_ignore_ascii_case(s))
            .with_context(|| format!("unknown preset \"{s}\"; use one of {}", Self::NAMES.join(", ")))
    }

    /// What the preset does, in words (for help and the inspector).
    pub fn describe(self) -> &'static str {
        match self {
            Preset::Imagenet => "ImageNet mean and std (0.485, 0.456, 0.406 / 0.229, 0.224, 0.225)",
            Preset::Unit => "pixels 0..1, no mean or std",
            Preset::SignedUnit => "pixels −1..1 (mean 0.5, std 0.5)",
            Preset::PerImage => "each picture minus its own mean, divided by its own std",
        }
    }

    /// The mean, std and rule for a model with `channels` channels (ImageNet's three values
    /// become their average for a one-channel model).
    fn normalisation(self, channels: usize) -> (Vec<f32>, Vec<f32>, Normalise) {
        match self {
            Preset::Imagenet => {
                let (m, s) = ([0.485f32, 0.456, 0.406], [0.229f32, 0.224, 0.225]);
                if channels == 3 {
                    (m.to_vec(), s.to_vec(), Normalise::Fixed)
                } else {
                    (vec![m.iter().sum::<f32>() / 3.0], vec![s.iter().sum::<f32>() / 3.0], Normalise::Fixed)
                }
            }
            Preset::Unit => (vec![0.0], vec![1.0], Normalise::Fixed),
            Preset::SignedUnit => (vec![0.5], vec![0.5], Normalise::Fixed),
            Preset::PerImage => (vec![], vec![], Normalise::PerImage),
        }
    }
}

/// What a new card says besides what the graph gives.
#[derive(Clone, Debug, Default)]
pub struct CardSpec {
    pub preset: Option<Preset>,
    /// Per-channel mean and std (one value, or one per channel); they replace the preset's.
    pub mean: Option<Vec<f32>>,
    pub std: Option<Vec<f32>>,
    /// A text file with one label per line (blank lines left out).
    pub labels: Option<PathBuf>,
    pub resize: Option<Resize>,
}

/// A card for `model`: size, layout, channels and output kind from the graph, the rest from
/// `spec`. Refuses a spec that says nothing about the normalisation: that is the card's point.
pub fn card_for(model: &Model, spec: &CardSpec) -> Result<FeedCard> {
    let mut card = FeedCard::infer(model)?;
    let c = card.input.channels;
    let (mut mean, mut std, rule) = match (spec.preset, &spec.mean, &spec.std) {
        (None, None, None) => bail!(
            "say how the model was trained to be fed: --preset {} , or --mean and --std (per channel, on pixels 0..1)",
            Preset::NAMES.join(" | ")
        ),
        (Some(p), _, _) => p.normalisation(c),
        (None, _, _) => (vec![0.0], vec![1.0], Normalise::Fixed),
    };
    if rule == Normalise::PerImage && (spec.mean.is_some() || spec.std.is_some()) {
        bail!("--preset per-image takes each picture's own mean and std; leave out --mean and --std");
    }
    if let Some(m) = &spec.mean {
        mean = m.clone();
    }
    if let Some(s) = &spec.std {
        std = s.clone();
    }
    card.input.mean = mean;
    card.input.std = std;
    card.input.normalise = rule;
    if let Some(r) = spec.resize {
        card.input.resize = r;
    }
    card.output.labels = match &spec.labels {
        Some(p) => read_labels(p, model.output_len())?,
        None => vec![],
    };
    card.check().context("the card asked for")?;
    Ok(card)
}

/// One label per line of a text file; the count must be the model's output count.
pub fn read_labels(path: &Path, outputs: usize) -> Result<Vec<String>> {
    let text = std::fs::read_to_string(path).with_context(|| format!("cannot read labels file {}", path.display()))?;
    let labels: Vec<String> = text.lines().map(str::trim).filter(|l| !l.is_empty()).map(str::to_string).collect();
    if labels.len() != outputs {
        bail!(
            "labels file {} has {} labels (one per non-blank line) but the model has {outputs} outputs; give one label per output, in output order",
            path.display(),
            labels.len()
        );
    }
    Ok(labels)
}

/// The card's text: a header saying where it came from, then the TOML.
pub fn card_text(card: &FeedCard, model: &Path, how: &str) -> Result<String> {
    let name = model.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let mut table = toml::Table::try_from(card).context("writing the feed card as TOML")?;
    // No labels given: none written (the card then names outputs "class N").
    if card.output.labels.is_empty()
        && let Some(out) = table.get_mut("output").and_then(|o| o.as_table_mut())
    {
        out.remove("labels");
    }
    let body = toml::to_string(&table).context("writing the feed card as TOML")?;
    Ok(format!(
        "# Feed card of {name}, written by `spurion card` ({how}).\n\
         # Size, layout and channels were read from the graph; check the rest against how the model\n\
         # was trained (resize, scale, mean/std). Fields: see README, section \"Feed cards\".\n\n{body}"
    ))
}

/// Writes `card` to `path` (the model's sidecar unless said otherwise); an existing file is kept
/// unless `force`. The file is written whole or not at all.
pub fn write_card(path: &Path, text: &str, force: bool) -> Result<()> {
    if path.exists() && !force {
        bail!(
            "{} already exists; spurion card does not overwrite a feed card. Edit it, remove it, or give --force to replace it",
            path.display()
        );
    }
    use std::io::Write;
    let dir = path.parent().filter(|d| !d.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let mut tmp = tempfile::NamedTempFile::new_in(dir).with_context(|| format!("cannot write in {} (check the folder's permissions)", dir.display()))?;
    tmp.write_all(text.as_bytes()).with_context(|| format!("cannot write {}", path.display()))?;
    // Without --force the card is put in place only if no file took its name meanwhile.
    let placed = if force { tmp.persist(path).map(|_| ()) } else { tmp.persist_noclobber(path).map(|_| ()) };
    placed.with_context(|| format!("cannot write {}", path.display()))?;
    // What was written must read back as the same card.
    FeedCard::load(path)?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn presets_parse_by_name_and_round_trip() {
        for p in Preset::ALL {
            assert_eq!(Preset::parse(p.name()).unwrap(), p);
        }
        assert!(Preset::parse("nope").unwrap_err().to_string().contains("signed-unit"));
        // −1..1: (0 − 0.5) / 0.5 = −1 and (1 − 0.5) / 0.5 = 1.
        let (m, s, _) = Preset::SignedUnit.normalisation(3);
        assert_eq!(((0.0 - m[0]) / s[0], (1.0 - m[0]) / s[0]), (-1.0, 1.0));
    }
}
