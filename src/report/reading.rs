//! `reading.json`: a reading's fields, the caution, and for pictures the regions found with
//! their figures and the suspect flag, all at the top level of one object.

use anyhow::Result;
use serde::Serialize;

use crate::feed::FeedCard;
use crate::methods::{Input, Reading};
use crate::model::Model;
use crate::regions::{Assessment, FinderSettings, FlagSettings, find_regions};

/// The content of `reading.json`. `spurion explain` writes it, the inspector's JSON export
/// writes it too (with the regions it already found).
#[derive(Clone, Debug, Serialize)]
pub struct ReadingFile<'a> {
    #[serde(flatten)]
    pub reading: &'a Reading,
    pub caution: &'static str,
    /// Regions, their figures and the flag: pictures only (a tensor has no image to search).
    #[serde(flatten)]
    pub assessment: Option<Assessment>,
}

impl<'a> ReadingFile<'a> {
    pub fn new(reading: &'a Reading, assessment: Option<Assessment>) -> ReadingFile<'a> {
        ReadingFile { reading, caution: crate::CAUTION, assessment }
    }

    /// The file as a JSON value. Fails if two parts would write the same key (a field of the
    /// reading named like one of the assessment), rather than let one silently replace the other.
    pub fn to_json(&self) -> Result<serde_json::Value> {
        let count = |v: serde_json::Value| v.as_object().map_or(0, |m| m.len());
        let expected = count(serde_json::to_value(self.reading)?)
            + 1
            + self.assessment.as_ref().map_or(Ok(0), |a| serde_json::to_value(a).map(count))?;
        let v = serde_json::to_value(self)?;
        // A clash shows as fewer keys than the parts hold (the map keeps one of them).
        if count(v.clone()) != expected {
            anyhow::bail!("internal: reading.json would hold the same key twice; please report");
        }
        Ok(v)
    }
}

/// For a picture, finds its regions (default finder settings) and assesses the reading against
/// them with both kinds of evidence and the default flag; `None` for a tensor.
pub fn assess_input(model: &Model, card: Option<&FeedCard>, input: &Input, reading: &Reading) -> Result<Option<Assessment>> {
    let Input::Picture { picture, .. } = input else { return Ok(None) };
    let regions = find_regions(&picture.luminance(), &FinderSettings::default());
    Ok(Some(crate::methods::assess(model, card, input, reading, &regions, &FlagSettings::default())?))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_reading_and_the_assessment_have_no_key_in_common() {
        // Both parts' field names, from their serialised forms: a clash would silently
        // overwrite one field in reading.json.
        let reading = Reading {
            method: "gradient".into(),
            settings: crate::methods::Method::Gradient,
            baseline: None,
            steps: None,
            target: crate::methods::Target { index: 0, label: "a".into() },
            score_kind: crate::methods::ScoreKind::Raw,
            score_input: 1.0,
            score_baseline: None,
            attribution_sum: 0.0,
            completeness_gap: None,
            elapsed_ms: 0.0,
            model_sha256: String::new(),
            model_file: String::new(),
            input: String::new(),
            input_shape: vec![],
            scores: vec![],
            labels: vec![],
            map: ndarray::ArrayD::zeros(ndarray::IxDyn(&[2, 2])),
            tensor_map: ndarray::ArrayD::zeros(ndarray::IxDyn(&[2, 2])),
            channel_axis: None,
        };
        let map = ndarray::Array2::<f32>::zeros((2, 2));
        let a = crate::regions::assess_regions(&map, &[], &FlagSettings::default()).unwrap();
        let v = ReadingFile::new(&reading, Some(a)).to_json().unwrap();
        assert!(v.get("suspect_reason").is_some() && v.get("method").is_some() && v.get("caution").is_some());
    }
}
