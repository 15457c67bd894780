//! The one set of defaults. The command line's flags, the inspector's form and
//! [`super::Request::default`] all read these, so that with every setting at its default the
//! two front ends give the same reading of the same image. Each says why it is what it is.

use super::{Baseline, MethodKind, Rule, ScoreKind};
use crate::sign::Sign;

/// Integrated gradients (Sundararajan, Taly, Yan 2017): it has a completeness property the
/// reading can check (the completeness gap) and, unlike occlusion, resolves single glyphs of a
/// tag at any model size.
pub const METHOD: MethodKind = MethodKind::IntegratedGradients;

/// σ of the default blur baseline, in model-grid pixels.
pub const BLUR_SIGMA: f32 = 8.0;

/// Uniform noise in the image's value range, [`IG_DRAWS`] draws averaged. Two reasons, both
/// measured on the sample models (README, "Defaults"):
/// - Not black: integrated gradients give a pixel the share (x − x′)·∫∂F, so a region that equals
///   the baseline gets no attribution at all, whatever the model makes of it — and a dark frame
///   equals a black baseline (Sturmfels, Lundberg, Lee 2020 discuss this blindness of constant
///   baselines). Against noise every pixel differs from its baseline.
/// - Not one fixed baseline (the blur of σ 8 used before): the map's magnitude is
///   |x − x′|·|mean gradient|, and with one fixed x′ the factor |x − x′| (an edge map for a blur,
///   the picture for black) is the same whatever the model, so the map keeps ranking like the
///   original after every layer is re-drawn (Adebayo et al. 2018 found input-multiplied maps
///   fail their randomisation test this way). On the shortcut model and the first Hillmoor demo
///   image the blur's map ranked with ρ 0.55 against the original with all seven layers
///   re-drawn; averaged over draws of noise, x − x′ changes from draw to draw and the map follows
///   the gradients, that is the model.
pub const BASELINE: Baseline = Baseline::UniformNoise { seed: SEED };

/// Draws of a distribution baseline that integrated gradients average, one straight path each.
/// Each draw costs a refined path, so the fewest that keep the map depending on the model: with
/// 4 draws the shortcut model's map ranked with ρ 0.14–0.17 against all-layers-re-drawn models
/// in a PyTorch copy of the randomisation test (1 draw: 0.45, 8: 0.07–0.10), against the
/// review's flag at 0.5.
pub const IG_DRAWS: usize = 4;

/// Why the default baseline is noise, for tooltips and help.
pub const BASELINE_WHY: &str = "The default baseline is uniform noise, four draws averaged. Integrated gradients give a pixel \
(x − x′) times its mean gradient, so a region equal to the baseline gets nothing (a dark frame under a black baseline \
is invisible to the map), and one fixed baseline leaves its own pattern (x − x′) in the map whatever the model: the \
map then survives the randomisation test's re-drawn weights. Against several draws of noise every pixel can show, \
and the map follows the model.";

/// Integrated gradients start each path at this many equal cells (one midpoint gradient each)
/// and add gradients where the path needs them (`methods/adaptive.rs`) until the completeness
/// gap is under [`IG_GAP`]. When the start already reaches the gap nothing else is spent (the
/// first check is the true gap, before any forward). 8 and not fewer: the gap checks the map's
/// total, not its pixels, and a very short start can meet the total by errors that cancel; on
/// the speed bench's ResNet-18 (in PyTorch, by hand) 4 midpoint steps gave a 0.15 % gap with a
/// map 18 % (L1) away from 128 steps', 8 steps 0.08 % and 9 %. The uniform tripling from 32 it
/// replaced spent 10,176 gradients on the 36 demo images under both sample models.
pub const IG_START_STEPS: usize = 8;

/// The completeness gap the refinement stops at. The method's paper advises checking that the
/// attributions sum to F(x) − F(x′) within 5 % (Sundararajan et al. 2017, section 3); 1 % leaves
/// room for the map to be read.
pub const IG_GAP: f32 = 0.01;

/// Where F(x) − F(x′) is tiny beside the map's total absolute attribution Σ|aᵢ| (supporting and
/// opposing parts that nearly cancel, as on an image the baseline barely changes the score of),
/// the relative gap divides by almost nothing and asks for accuracy below float32 rounding: a
/// clean demo image with F(x) − F(x′) = 0.02 and Σ|aᵢ| = 74 ran to 864 steps, and its error grew
/// again from 96 to 288 steps. The refinement then holds the error to [`IG_GAP`] of
/// max(|F(x) − F(x′)|, this share of Σ|aᵢ|) instead; with a difference of more than a
/// thousandth of the map's mass nothing changes. The reported completeness gap is always the
/// plain relative one.
pub const IG_GAP_FLOOR: f64 = 1e-3;

/// The rule of a fixed step count (`--steps N`): Gauss–Legendre is exact for polynomials of
/// degree 2N − 1 and needs fewer steps than the midpoint rule on smooth paths.
pub const IG_FIXED_RULE: Rule = Rule::GaussLegendre;

/// Samples of SmoothGrad and expected gradients: 32 keeps the sampling noise of the mean small
/// next to the map (its standard error falls as 1/√n) at a cost of 32 gradients.
pub const SAMPLES: usize = 32;

/// SmoothGrad's noise as a share of the input's value range. SmoothGrad's paper found 10–20 %
/// worked well (Smilkov et al. 2017; from memory).
pub const SMOOTHGRAD_NOISE: f32 = 0.15;

/// Seed of SmoothGrad's noise, expected gradients' draws and the noise baselines: fixed, so a
/// reading repeats exactly.
pub const SEED: u64 = 0;

/// σ of the Gaussian-noise baseline, in image units (0..1).
pub const NOISE_SIGMA: f32 = 0.2;

/// Occlusion window and stride in model-input pixels: a window about the size of a burned-in
/// glyph run on 128–224 pixel inputs, half-overlapping (Zeiler and Fergus 2014 slid a grey
/// square; the size is ours).
pub const WINDOW: usize = 16;
pub const STRIDE: usize = 8;

/// The logits: the input of a final softmax when the graph ends in one, else the output of a
/// logits model. A confident softmax saturates and its gradients vanish; the logits do not.
pub const SCORE: ScoreKind = ScoreKind::Logits;

/// Pictures show the supporting part of the map: what raises the target's score, which is
/// also what the suspect flag measures.
pub const SIGN: Sign = Sign::Supporting;

/// Tint opacity of overlays.
pub const OPACITY: f32 = 0.7;

/// The defaults as the command line writes them (clap's defaults are text); a test holds each
/// equal to the typed value above.
pub const METHOD_TEXT: &str = "integrated-gradients";
pub const BASELINE_TEXT: &str = "uniform-noise:0";
pub const SCORE_TEXT: &str = "logits";
pub const SIGN_TEXT: &str = "supporting";
pub const RULE_TEXT: &str = "gauss-legendre";

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_text_forms_are_the_typed_defaults() {
        assert_eq!(MethodKind::parse(METHOD_TEXT), Some(METHOD));
        assert_eq!(Baseline::parse(BASELINE_TEXT).unwrap(), BASELINE);
        assert_eq!(ScoreKind::parse(SCORE_TEXT).unwrap(), SCORE);
        assert_eq!(Sign::parse(SIGN_TEXT), Some(SIGN));
        assert_eq!(Rule::parse(RULE_TEXT).unwrap(), IG_FIXED_RULE);
    }
}
