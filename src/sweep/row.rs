//! One image's line of a sweep: what `sweep.csv` and `sweep.jsonl` hold.

use serde::{Deserialize, Serialize};

use crate::regions::HotspotReport;

/// One row per image. Figures about regions are of all found regions together.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Row {
    /// Relative to the images folder, `/` between parts.
    pub path: String,
    pub group: String,
    /// The model's top class at the input, its label and its score (the reading's score kind).
    pub top: usize,
    pub top_label: String,
    pub top_score: f32,
    pub target: usize,
    pub target_label: String,
    pub target_score: f32,
    /// Share of the supporting attribution on all found regions together, and its lift.
    pub mark_share: Option<f64>,
    pub lift: Option<f64>,
    /// Painting all found regions out: the target's score drop, probability drop, top class then.
    pub removal_drop: Option<f32>,
    pub removal_probability_drop: Option<f64>,
    pub top_after_removal: Option<usize>,
    pub suspect: bool,
    /// Which evidence fired, joined by `+` (`attribution`, `removal`, `burned-in-annotation`).
    pub evidence: String,
    /// How many regions were found, and their labels joined by `; `.
    pub regions: usize,
    pub region_labels: String,
    pub completeness_gap: Option<f64>,
    /// Integrated gradients' step count (refined or fixed).
    pub steps: Option<usize>,
    /// Burned In Annotation as the file declares it (DICOM only).
    pub burned_in_annotation: Option<bool>,
    /// The curator's verdict on the image in the ledger given to the sweep (clean, marked,
    /// unsure, exclude), as it stood when the files were written; empty without a ledger.
    #[serde(default)]
    pub verdict: Option<String>,
    /// The map's hotspots in one line each (`sweep.csv`'s view of `hotspots`): place, box,
    /// role and the probability drop when painted out, joined by `; `.
    #[serde(default)]
    pub hotspot_summary: String,
    /// The map's hotspots: place, box, descriptor, appearance, mark-likeness, what painting each
    /// out did. In `sweep.jsonl` and the cache; `sweep.csv` has `hotspot_summary` instead.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub hotspots: Vec<HotspotReport>,
    /// Seconds this image's reading took when it was computed (a cached row keeps them).
    pub seconds: f64,
}

impl Row {
    /// Whether painting the regions out changed the top class.
    pub fn flipped(&self) -> Option<bool> {
        self.top_after_removal.map(|t| t != self.top)
    }

    /// The row as `sweep.csv` holds it: without the hotspot list (a table cell holds no list;
    /// `hotspot_summary` says it in words).
    pub fn for_csv(&self) -> Row {
        Row { hotspots: vec![], ..self.clone() }
    }

    /// The same row with its seconds set to 0, for comparing runs whose timing differs.
    pub fn timeless(&self) -> Row {
        Row { seconds: 0.0, ..self.clone() }
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::Row;

    /// A row with every figure empty, for tests to fill in.
    pub fn blank() -> Row {
        Row {
            path: String::new(),
            group: String::new(),
            top: 0,
            top_label: String::new(),
            top_score: 0.0,
            target: 0,
            target_label: String::new(),
            target_score: 0.0,
            mark_share: None,
            lift: None,
            removal_drop: None,
            removal_probability_drop: None,
            top_after_removal: None,
            suspect: false,
            evidence: String::new(),
            regions: 0,
            region_labels: String::new(),
            completeness_gap: None,
            steps: None,
            burned_in_annotation: None,
            verdict: None,
            seconds: 0.0,
            hotspot_summary: String::new(),
            hotspots: vec![],
        }
    }
}
