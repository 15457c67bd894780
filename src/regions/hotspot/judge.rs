//! A hotspot's role once the model has been asked: painting it out moved the score or not, and
//! it looks like a mark or not. Only both together make suspect evidence.

use serde::{Deserialize, Serialize};

use super::{Descriptor, Hotspot};
use crate::regions::flag::{Assessment, Evidence, FlagSettings, Removal};

/// What a hotspot turned out to be.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum HotspotRole {
    /// Looks like a mark, and painting it out moves the score: suspect evidence.
    SuspectMark,
    /// Looks like anatomy, and painting it out moves the score: the model's evidence.
    ModelEvidence,
    /// Looks like a mark, but painting it out leaves the score: a mark the model does not use.
    UnusedMark,
    /// Looks like anatomy, and painting it out leaves the score.
    Minor,
    /// No model was asked (a tensor input, or hotspots found without one).
    Untested,
}

impl HotspotRole {
    pub fn name(self) -> &'static str {
        match self {
            HotspotRole::SuspectMark => "suspect mark",
            HotspotRole::ModelEvidence => "the model's evidence",
            HotspotRole::UnusedMark => "mark not used",
            HotspotRole::Minor => "minor",
            HotspotRole::Untested => "not tested",
        }
    }
}

/// What painting one hotspot out did: its whole removal mask, and its strokes alone (for a
/// hotspot that looks like a mark and has strokes).
#[derive(Clone, Debug, PartialEq)]
pub struct HotspotRemoval {
    pub whole: Removal,
    pub strokes: Option<Removal>,
}

/// One hotspot as `reading.json`, the sweep's rows and the inspector carry it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct HotspotReport {
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    /// `[width, height]` of the image the box is on.
    pub image_size: [usize; 2],
    /// Share of the map's part on the hotspot, and its lift.
    pub share: f64,
    pub lift: f64,
    pub descriptor: Descriptor,
    pub mark_likeness: f32,
    pub looks_like_mark: bool,
    /// See [`super::appearance`].
    pub appearance: Vec<f32>,
    /// Area of the painted-out mask, pixels.
    pub removal_area: usize,
    /// The painted-out mask stays within the size a hotspot may have (see [`judge`]); when it
    /// does not and the hotspot has no strokes to paint alone, its removal is not a mark's.
    #[serde(default = "yes")]
    pub removal_confined: bool,
    /// What painting it out did (absent when no model was asked).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub removal: Option<Removal>,
    /// What painting its strokes alone out did (a hotspot that looks like a mark and has
    /// strokes, thin ink a grey opening takes away): a mark drawn over anatomy is suspect only
    /// when its strokes alone move the score.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stroke_removal: Option<Removal>,
    /// The top class changed when it was painted out.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub flipped: Option<bool>,
    pub role: HotspotRole,
    pub suspect: bool,
}

fn yes() -> bool {
    true
}

impl HotspotReport {
    /// "corner hotspot at [x0, y0, x1, y1]".
    pub fn label(&self) -> String {
        format!("{} hotspot at {:?}", self.descriptor.place.name(), self.bbox)
    }
}

/// The reports of `hotspots`, with what painting each out did (`removals`, one per hotspot,
/// in order; `None` when no model was asked) given the top class at the input. Removal
/// "matters" when it lowers the target's probability by at least `min_probability_drop`.
///
/// A hotspot that looks like a mark is suspect only when a removal confined to the mark moves
/// the score: its strokes alone when it has strokes, else its whole removal mask as long as that
/// mask stays within the size a hotspot may have (`max_area_fraction` of the image). Beyond that
/// the ink joined to the hotspot has run on into the surroundings (a lung field, the body), and
/// painting it out tests them as much as any mark: the change is the model's evidence, not a
/// mark's.
pub fn judge(hotspots: &[Hotspot], removals: Option<&[HotspotRemoval]>, top: usize, s: &FlagSettings) -> Vec<HotspotReport> {
    let matters = |r: &Removal| r.probability_drop >= s.min_probability_drop;
    hotspots
        .iter()
        .enumerate()
        .map(|(i, h)| {
            let r = removals.and_then(|r| r.get(i)).cloned();
            let (hh, ww) = h.mask.dim();
            let removal_area = h.removal_mask.iter().filter(|&&m| m).count();
            let confined = removal_area as f64 <= s.hotspot.max_area_fraction * (hh * ww) as f64;
            let role = match &r {
                None => HotspotRole::Untested,
                Some(r) => match (matters(&r.whole), h.looks_like_mark, r.strokes.as_ref().map(matters)) {
                    // The strokes alone leave the answer: what matters lies under them.
                    (true, true, Some(false)) => HotspotRole::ModelEvidence,
                    (true, true, Some(true)) => HotspotRole::SuspectMark,
                    // No strokes to paint alone: the whole removal speaks for the mark only
                    // while it stays the size of one.
                    (true, true, None) if confined => HotspotRole::SuspectMark,
                    (true, _, _) => HotspotRole::ModelEvidence,
                    (false, true, _) => HotspotRole::UnusedMark,
                    (false, false, _) => HotspotRole::Minor,
                },
            };
            HotspotReport {
                bbox: h.bbox,
                image_size: [ww, hh],
                share: h.share,
                lift: h.lift,
                descriptor: h.descriptor.clone(),
                mark_likeness: h.mark_likeness,
                looks_like_mark: h.looks_like_mark,
                appearance: h.appearance.clone(),
                removal_area,
                removal_confined: confined,
                flipped: r.as_ref().map(|r| r.whole.top != top),
                stroke_removal: r.as_ref().and_then(|r| r.strokes.clone()),
                removal: r.map(|r| r.whole),
                role,
                suspect: role == HotspotRole::SuspectMark,
            }
        })
        .collect()
}

/// Adds the hotspots to an assessment: the list, and the hotspot evidence when one of them is
/// a suspect mark (the reason then says which); otherwise a word on the hotspots joins the
/// reason of a reading that is not suspect.
pub fn add_hotspot_evidence(a: &mut Assessment, reports: Vec<HotspotReport>, s: &FlagSettings) {
    let best = reports
        .iter()
        .filter(|r| r.suspect)
        .max_by(|x, y| x.removal.as_ref().map_or(0.0, |r| r.probability_drop).total_cmp(&y.removal.as_ref().map_or(0.0, |r| r.probability_drop)));
    if let Some(h) = best {
        let r = h.removal.as_ref().expect("a suspect hotspot was painted out");
        let said = format!(
            "a {} that looks like a mark (mark-likeness {:.2}: saturation {:.2}, edge sharpness {:.2}, thinness {:.2}) holds {:.2} of the {} \
             attribution, and painting it out ({}) lowers the target's probability by {:.2} (at least {}; top class after: {})",
            h.label(),
            h.mark_likeness,
            h.descriptor.saturation,
            h.descriptor.edge_sharpness,
            h.descriptor.thinness,
            h.share,
            s.part.name(),
            r.fill,
            r.probability_drop,
            s.min_probability_drop,
            r.top_class()
        );
        let said = match &h.stroke_removal {
            Some(k) => format!("{said}; its strokes alone, {:.2}", k.probability_drop),
            None => said,
        };
        a.reason = if a.suspect { format!("{}; and {said}", a.reason) } else { said };
        a.suspect = true;
        a.suspect_evidence.push(Evidence::Hotspot);
    } else if !reports.is_empty() && !a.suspect {
        let count = |role: HotspotRole| reports.iter().filter(|r| r.role == role).count();
        let mut parts = vec![];
        for role in [HotspotRole::ModelEvidence, HotspotRole::UnusedMark, HotspotRole::Minor, HotspotRole::Untested] {
            let n = count(role);
            if n > 0 {
                parts.push(format!("{n} {}", role.name()));
            }
        }
        a.reason = format!(
            "{}; {} hotspot{} ({}): none both looks like a mark and moves the score when painted out",
            a.reason,
            reports.len(),
            if reports.len() == 1 { "" } else { "s" },
            parts.join(", ")
        );
    }
    a.hotspots = reports;
}

#[cfg(test)]
mod tests {
    use ndarray::Array2;

    use super::*;
    use crate::regions::hotspot::Place;

    /// A hotspot in a 100×100 image at rows and columns 40..50, that looks like a mark, whose
    /// removal mask is the first `removal_rows` rows, and with strokes when asked.
    fn hotspot(removal_rows: usize, strokes: bool) -> Hotspot {
        let mask = Array2::from_shape_fn((100, 100), |(y, x)| (40..50).contains(&y) && (40..50).contains(&x));
        let removal_mask = Array2::from_shape_fn((100, 100), |(y, x)| y < removal_rows || mask[[y, x]]);
        let descriptor = Descriptor {
            centre: [0.45, 0.45],
            box_fraction: [0.4, 0.4, 0.5, 0.5],
            place: Place::Interior,
            edge_distance: 0.4,
            outside_foreground: 0.0,
            saturation: 1.0,
            edge_sharpness: 1.0,
            stroke_width_px: 1.0,
            thinness: 0.9,
            area_fraction: 0.01,
        };
        Hotspot {
            bbox: [40, 40, 50, 50],
            stroke_mask: strokes.then(|| mask.clone()),
            mask,
            removal_mask,
            share: 0.5,
            lift: 50.0,
            mark_likeness: descriptor.mark_likeness(),
            looks_like_mark: true,
            descriptor,
            appearance: vec![],
        }
    }

    fn removal(probability_drop: f64) -> Removal {
        Removal { fill: "harmonic".into(), score: 0.0, drop: 1.0, top: 1, top_label: None, probability_drop, mask: None }
    }

    fn role(h: Hotspot, whole: f64, strokes: Option<f64>) -> HotspotRole {
        let r = HotspotRemoval { whole: removal(whole), strokes: strokes.map(removal) };
        let s = FlagSettings::default();
        judge(&[h], Some(&[r]), 0, &s)[0].role
    }

    #[test]
    fn a_mark_is_suspect_only_on_a_removal_confined_to_it() {
        // The default limit is 8 % of the image: 800 pixels here.
        let limit = FlagSettings::default().hotspot.max_area_fraction;
        assert!((limit - 0.08).abs() < 1e-12, "the test assumes the default limit, got {limit}");
        // Small removal mask (100 px + 2 rows = 300 px), removal matters: suspect.
        assert_eq!(role(hotspot(2, false), 0.6, None), HotspotRole::SuspectMark);
        // The removal ran on over 30 rows (3,000+ px): the score moved, but not for a mark.
        assert_eq!(role(hotspot(30, false), 0.6, None), HotspotRole::ModelEvidence);
        // With strokes, the strokes alone decide, whatever the whole mask's size.
        assert_eq!(role(hotspot(30, true), 0.6, Some(0.5)), HotspotRole::SuspectMark);
        assert_eq!(role(hotspot(2, true), 0.6, Some(0.0)), HotspotRole::ModelEvidence);
        // Removal that leaves the score: a mark not used, confined or not.
        assert_eq!(role(hotspot(30, false), 0.0, None), HotspotRole::UnusedMark);
        assert_eq!(role(hotspot(2, false), 0.1, None), HotspotRole::UnusedMark);
        // The report says which.
        let r = HotspotRemoval { whole: removal(0.6), strokes: None };
        let rep = &judge(&[hotspot(30, false)], Some(&[r]), 0, &FlagSettings::default())[0];
        assert!(!rep.removal_confined && !rep.suspect && rep.removal_area > 800);
    }
}
