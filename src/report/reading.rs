//! `reading.json`: a reading's fields, the caution, and for pictures the regions found with
//! their figures and the suspect flag, all at the top level of one object.

use anyhow::Result;
use serde::Serialize;

use crate::feed::dicom::DicomSummary;
use crate::feed::window::ResolvedWindow;
use crate::feed::Picture;
use crate::methods::{Input, Reading};
use crate::regions::Assessment;

use super::FeedRecord;

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
    /// Where a picture's pixels came from: no patient-identifying attribute is ever in it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub source: Option<SourceFacts>,
    /// The file's patient-identifying attributes, only when the user asked for them.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub patient_data: Option<PatientData>,
    /// How the input was fed, each value with its origin (see `report::feed`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub feed: Option<FeedRecord>,
}

/// How a picture's pixels were made from its file.
#[derive(Clone, Debug, Serialize)]
pub struct SourceFacts {
    pub bit_depth: u8,
    /// The window that turned stored values into 0..1 (DICOM, 16-bit images).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub window: Option<ResolvedWindow>,
    /// A DICOM file's non-identifying facts (modality, size, bits, transfer syntax, windows).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dicom: Option<DicomSummary>,
    /// Burned In Annotation (0028,0301) as the file declares it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub burned_in_annotation: Option<bool>,
}

impl SourceFacts {
    /// The facts of a picture, `None` for an 8-bit image from no DICOM file (nothing to say).
    pub fn of(picture: &Picture) -> Option<SourceFacts> {
        if picture.window.is_none() && picture.dicom.is_none() {
            return None;
        }
        let dicom = picture.dicom.as_ref().map(|d| DicomSummary { window_used: picture.window.clone(), ..d.safe_summary() });
        Some(SourceFacts {
            bit_depth: picture.bit_depth,
            window: picture.window.clone(),
            dicom,
            burned_in_annotation: picture.burned_in_annotation(),
        })
    }
}

/// Patient-identifying attributes written because the user asked, saying so.
#[derive(Clone, Debug, Serialize)]
pub struct PatientData {
    pub note: &'static str,
    pub attributes: Vec<PatientAttribute>,
}

#[derive(Clone, Debug, Serialize)]
pub struct PatientAttribute {
    pub keyword: String,
    pub value: String,
}

impl PatientData {
    /// The identifying attributes of a picture's DICOM file (DICOM PS3.15 Annex E, Basic
    /// Profile, as `feed::dicom::BASIC_PROFILE` lists them); `None` for other pictures.
    pub fn of(picture: &Picture) -> Option<PatientData> {
        let d = picture.dicom.as_ref()?;
        Some(PatientData {
            note: "included because it was asked for (--with-patient-data): this file holds \
                   patient-identifying values; keep it where such data may be kept",
            attributes: d.identifying().iter().map(|(k, v)| PatientAttribute { keyword: k.clone(), value: v.clone() }).collect(),
        })
    }
}

impl<'a> ReadingFile<'a> {
    pub fn new(reading: &'a Reading, assessment: Option<Assessment>) -> ReadingFile<'a> {
        ReadingFile { reading, caution: crate::CAUTION, assessment, source: None, patient_data: None, feed: None }
    }

    /// With the facts of the picture read (`input` a tensor: none), and its patient data when
    /// `with_patient_data`.
    pub fn with_input(mut self, input: &Input, with_patient_data: bool) -> ReadingFile<'a> {
        self.feed = Some(FeedRecord::of_input(input, std::path::Path::new(&self.reading.model_file)));
        match input {
            Input::Picture { picture, .. } => self.with_picture(picture, with_patient_data),
            Input::Tensor { .. } => self,
        }
    }

    /// With the facts of `picture`, and its patient data when `with_patient_data`.
    pub fn with_picture(mut self, picture: &Picture, with_patient_data: bool) -> ReadingFile<'a> {
        self.source = SourceFacts::of(picture);
        if with_patient_data {
            self.patient_data = PatientData::of(picture);
        }
        self
    }

    /// With the record of how the input was fed.
    pub fn with_feed(mut self, feed: FeedRecord) -> ReadingFile<'a> {
        self.feed = Some(feed);
        self
    }

    /// The file as a JSON value. Fails if two parts would write the same key (a field of the
    /// reading named like one of the assessment), rather than let one silently replace the other.
    pub fn to_json(&self) -> Result<serde_json::Value> {
        let count = |v: serde_json::Value| v.as_object().map_or(0, |m| m.len());
        let expected = count(serde_json::to_value(self.reading)?)
            + 1
            + self.assessment.as_ref().map_or(Ok(0), |a| serde_json::to_value(a).map(count))?
            + self.source.is_some() as usize
            + self.patient_data.is_some() as usize
            + self.feed.is_some() as usize;
        let v = serde_json::to_value(self)?;
        // A clash shows as fewer keys than the parts hold (the map keeps one of them).
        if count(v.clone()) != expected {
            anyhow::bail!("internal: reading.json would hold the same key twice; please report");
        }
        Ok(v)
    }
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
            completeness: None,
            elapsed_ms: 0.0,
            model_sha256: String::new(),
            model_file: String::new(),
            model_output: String::new(),
            input: String::new(),
            input_shape: vec![],
            scores: vec![],
            labels: vec![],
            map: ndarray::ArrayD::zeros(ndarray::IxDyn(&[2, 2])),
            tensor_map: ndarray::ArrayD::zeros(ndarray::IxDyn(&[2, 2])),
            channel_axis: None,
        };
        let map = ndarray::Array2::<f32>::zeros((2, 2));
        let a = crate::regions::assess_regions(&map, &[], &crate::regions::FlagSettings::default()).unwrap();
        let v = ReadingFile::new(&reading, Some(a)).to_json().unwrap();
        assert!(v.get("suspect_reason").is_some() && v.get("method").is_some() && v.get("caution").is_some());
    }
}
