//! Model against model: the same image read under two models with the same request, the two
//! readings side by side with how far their maps agree (Spearman's ρ and the top-k % overlap,
//! `methods::agree`) and how much of each map's support falls on the found regions (mark share
//! and lift, `regions::figures`).

use anyhow::{Result, bail};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::Case;
use crate::control::Control;
use crate::feed::FeedCard;
use crate::methods::agree::agreement;
use crate::methods::{self, Input, Reading, Request, TargetSpec, Target, top_index};
use crate::model::Model;
use crate::regions::Region;
use crate::regions::figures::{lift, mark_share};
use crate::sign::Sign;

/// One model's side.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Side {
    pub model_file: String,
    pub model_sha256: String,
    /// The model's top class at the input.
    pub top: usize,
    pub top_label: String,
    /// The class read (the first model's target on both sides).
    pub target: Target,
    pub score_input: f32,
    pub score_baseline: Option<f32>,
    pub completeness_gap: Option<f64>,
    /// Share of the supporting attribution on all found regions together, and its lift.
    pub mark_share: Option<f64>,
    pub lift: Option<f64>,
}

/// The two maps' agreement seen through one sign.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SignAgreement {
    pub sign: Sign,
    pub spearman: Option<f64>,
    pub top_overlap: Option<f64>,
}

#[derive(Clone, Debug, Serialize)]
pub struct Against {
    pub first: Side,
    pub second: Side,
    /// Share of pixels for the top-k overlap.
    pub share: f64,
    /// Under the magnitude, supporting and signed views.
    pub agreement: Vec<SignAgreement>,
    /// What a reader should know (labels that differ, a different top class).
    pub notes: Vec<String>,
    #[serde(skip)]
    pub second_reading: Reading,
}

fn side(r: &Reading, regions: &[Region]) -> Result<Side> {
    let scores = ndarray::Array1::from(r.scores.clone());
    let top = top_index(&scores);
    let map = r.map2d();
    let (mut share, mut lf) = (None, None);
    if !regions.is_empty() {
        let mut all = Array2::from_elem(map.dim(), false);
        for g in regions.iter().filter(|g| g.mask.dim() == map.dim()) {
            all.zip_mut_with(&g.mask, |a, &m| *a |= m);
        }
        share = mark_share(&map, &all, Sign::Supporting)?;
        lf = lift(&map, &all, Sign::Supporting)?;
    }
    Ok(Side {
        model_file: r.model_file.clone(),
        model_sha256: r.model_sha256.clone(),
        top,
        top_label: r.labels.get(top).cloned().unwrap_or_default(),
        target: r.target.clone(),
        score_input: r.score_input,
        score_baseline: r.score_baseline,
        completeness_gap: r.completeness_gap,
        mark_share: share,
        lift: lf,
    })
}

/// Compares two readings of the same image (maps on the same grid).
pub fn compare(first: &Reading, second: &Reading, regions: &[Region], share: f64) -> Result<Against> {
    let (a, b) = (first.map2d(), second.map2d());
    if a.dim() != b.dim() {
        bail!("the two readings' maps are {:?} and {:?}; they must be of the same image", a.dim(), b.dim());
    }
    let agreement = [Sign::Magnitude, Sign::Supporting, Sign::Both]
        .into_iter()
        .map(|sign| {
            let m = agreement(&[&a, &b], sign, share);
            SignAgreement { sign, spearman: m.spearman[0][1], top_overlap: m.overlap[0][1] }
        })
        .collect();
    let (s1, s2) = (side(first, regions)?, side(second, regions)?);
    let mut notes = vec![];
    if first.labels != second.labels {
        notes.push(format!(
            "the models name their classes differently ({} against {}); class {} is compared by its index",
            first.labels.join(", "),
            second.labels.join(", "),
            first.target.index
        ));
    }
    if s1.top != s2.top {
        notes.push(format!("the models disagree on the top class: {} \"{}\" against {} \"{}\"", s1.top, s1.top_label, s2.top, s2.top_label));
    }
    Ok(Against { first: s1, second: s2, share, agreement, notes, second_reading: second.clone() })
}

/// Reads the case's image under `model2` (fed through `card2`) with the case's request, for the
/// reading's class, and compares. Progress: the second reading's.
pub fn against(case: &Case, reading: &Reading, model2: &Model, card2: Option<&FeedCard>, regions: &[Region], share: f64, ctl: &Control) -> Result<Against> {
    if reading.target.index >= model2.output_len() {
        bail!(
            "class {} read under {} does not exist in {} ({} outputs)",
            reading.target.index,
            reading.model_file,
            model2.path().display(),
            model2.output_len()
        );
    }
    let input2 = match case.input {
        Input::Picture { picture, .. } => {
            let Some(card) = card2 else { bail!("a picture needs a feed card for {}", model2.path().display()) };
            Input::picture(picture.clone(), card)?
        }
        Input::Tensor { tensor, name } => Input::tensor(tensor.clone(), name.clone()),
    };
    let req = Request { target: TargetSpec::Index(reading.target.index), ..case.request.clone() };
    let second = methods::explain(model2, card2, &input2, &req, ctl)?;
    compare(reading, &second, regions, share)
}
