//! Scoring: which output vector a method reads, the score of the target class in it, the seed
//! of the reverse pass, and how the target class is picked.

use anyhow::{Context, Result, bail};
use ndarray::Array1;

use super::{ScoreKind, TargetSpec};
use crate::feed::{FeedCard, OutputKind};
use crate::model::{Model, Tap};

/// Resolves the score kind against the model and card: which tap, and how scores and seeds
/// follow from the tapped vector.
#[derive(Clone, Copy, Debug)]
pub struct Scorer {
    pub tap: Tap,
    softmax: bool,
    /// The tapped vector is already probabilities (a probabilities model's output).
    probabilities: bool,
    pub target: usize,
}

impl Scorer {
    pub fn new(model: &Model, card: Option<&FeedCard>, kind: ScoreKind, target: usize) -> Result<Scorer> {
        let probabilities = model.ends_in_softmax()
            || card.map(|c| c.output.kind == OutputKind::Probabilities).unwrap_or(false);
        let (tap, softmax) = match kind {
            ScoreKind::Raw => (Tap::Output, false),
            ScoreKind::Softmax => (Tap::Output, !probabilities),
            ScoreKind::Logits if model.ends_in_softmax() => (Tap::BeforeSoftmax, false),
            ScoreKind::Logits if probabilities => bail!(
                "the score \"logits\" needs the logits, but model {} gives probabilities and its graph does \
                 not end in a softmax spurion can step before. Use --score raw or --score softmax.",
                model.path().display()
            ),
            ScoreKind::Logits => (Tap::Output, false),
        };
        Ok(Scorer { tap, softmax, probabilities: probabilities && tap == Tap::Output, target })
    }

    /// The same scoring for another target class.
    pub fn with_target(self, target: usize) -> Scorer {
        Scorer { target, ..self }
    }

    /// The score from a tapped vector.
    pub fn score(&self, v: &Array1<f32>) -> f32 {
        if self.softmax { softmax(v)[self.target] } else { v[self.target] }
    }

    /// The target's probability from a tapped vector: the vector itself when it already holds
    /// probabilities, else its softmax.
    pub fn probability(&self, v: &Array1<f32>) -> f32 {
        if self.probabilities { v[self.target] } else { softmax(v)[self.target] }
    }

    /// The cotangent of the tapped vector: e_t, or p_t (e_t − p) through a softmax.
    pub fn seed(&self, v: &Array1<f32>) -> Array1<f32> {
        if self.softmax {
            let p = softmax(v);
            let pt = p[self.target];
            let mut s = p.mapv(|q| -pt * q);
            s[self.target] += pt;
            s
        } else {
            let mut s = Array1::zeros(v.len());
            s[self.target] = 1.0;
            s
        }
    }
}

pub fn softmax(v: &Array1<f32>) -> Array1<f32> {
    let m = v.fold(f32::NEG_INFINITY, |a, b| a.max(*b));
    let e = v.mapv(|x| ((x - m) as f64).exp());
    let s = e.sum();
    e.mapv(|x| (x / s) as f32)
}

/// The index of the largest value (the first of equal ones).
pub fn top_index(scores: &Array1<f32>) -> usize {
    scores.iter().enumerate().fold((0, f32::NEG_INFINITY), |b, (i, v)| if *v > b.1 { (i, *v) } else { b }).0
}

/// Picks the target index from the spec and the scores at the input.
pub fn resolve_target(spec: &TargetSpec, scores: &Array1<f32>, labels: &[String]) -> Result<usize> {
    match spec {
        TargetSpec::Top => Ok(top_index(scores)),
        TargetSpec::Index(i) if *i < scores.len() => Ok(*i),
        TargetSpec::Index(i) => bail!("target class {i} does not exist: the model has {} outputs (0..{})", scores.len(), scores.len() - 1),
        TargetSpec::Label(l) => labels
            .iter()
            .position(|x| x.eq_ignore_ascii_case(l))
            .with_context(|| {
                if labels.is_empty() {
                    format!("target \"{l}\" is not a class index and the model has no labels (add them to its feed card)")
                } else {
                    format!("target \"{l}\" is not one of the labels: {}", labels.join(", "))
                }
            }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn softmax_seed_is_the_softmax_jacobian_row() {
        // d p_t / d z_j = p_t (δ_tj − p_j) (common practice); checked against central differences.
        let s = Scorer { tap: Tap::Output, softmax: true, probabilities: false, target: 1 };
        let z = ndarray::arr1(&[0.3f32, -1.2, 2.0]);
        let seed = s.seed(&z);
        let h = 1e-3f32;
        for j in 0..3 {
            let mut a = z.clone();
            a[j] += h;
            let mut b = z.clone();
            b[j] -= h;
            let fd = (s.score(&a) - s.score(&b)) / (2.0 * h);
            assert!((fd - seed[j]).abs() < 1e-4, "j={j} fd={fd} seed={}", seed[j]);
        }
    }

    #[test]
    fn targets_resolve_by_index_label_and_top() {
        let s = ndarray::arr1(&[0.1f32, 0.7, 0.2]);
        let l: Vec<String> = ["a", "Finding present", "c"].iter().map(|s| s.to_string()).collect();
        assert_eq!(resolve_target(&TargetSpec::Top, &s, &l).unwrap(), 1);
        assert_eq!(resolve_target(&TargetSpec::parse("2"), &s, &l).unwrap(), 2);
        assert_eq!(resolve_target(&TargetSpec::parse("finding present"), &s, &l).unwrap(), 1);
        assert!(resolve_target(&TargetSpec::Index(3), &s, &l).unwrap_err().to_string().contains("0..2"));
        assert!(resolve_target(&TargetSpec::parse("nope"), &s, &l).unwrap_err().to_string().contains("Finding present"));
    }
}
