//! What the reading controls edit, and how it becomes an engine request.
//!
//! The form keeps every parameter of every choice (so switching method and back keeps the steps
//! the user typed); only the ones the chosen method and baseline use go into the request, as the
//! engine's own typed values.

use std::path::{Path, PathBuf};

use crate::methods::catalog::{BaselineKind, METHODS, MethodKind};
use crate::methods::defaults;
use crate::methods::{Baseline, Method, Request, ScoreKind, TargetSpec};

/// The short line under the baseline control when black is chosen.
pub const BLACK_BASELINE_CAVEAT: &str = "black = the dark frame: x − x′ = 0 there, so a frame shortcut gets no attribution";

/// Everything the reading controls edit.
#[derive(Clone, Debug, PartialEq)]
pub struct Form {
    pub method: MethodKind,
    pub steps: usize,
    /// Integrated gradients: refine from `steps` until the completeness gap is under 1%.
    pub refine: bool,
    pub samples: usize,
    pub smooth_noise: f32,
    pub seed: u64,
    pub window: usize,
    pub stride: usize,
    pub baseline: BaselineKind,
    pub blur_sigma: f32,
    pub noise_sigma: f32,
    pub noise_seed: u64,
    /// Folder the dataset mean is taken over ("" = the folder of the current image).
    pub mean_dir: String,
    /// Image used as the custom baseline ("" = none chosen yet).
    pub custom_path: String,
    /// Folder expected gradients draw baselines from ("" = the folder of the current image).
    pub draws_dir: String,
    pub target: TargetSpec,
    pub score: ScoreKind,
}

impl Default for Form {
    fn default() -> Self {
        // Every value from the one set of defaults the command line uses too.
        let d = Request::default();
        Form {
            method: d.method.kind(),
            steps: defaults::IG_START_STEPS,
            refine: true,
            samples: defaults::SAMPLES,
            smooth_noise: defaults::SMOOTHGRAD_NOISE,
            seed: defaults::SEED,
            window: defaults::WINDOW,
            stride: defaults::STRIDE,
            baseline: d.baseline.kind(),
            blur_sigma: defaults::BLUR_SIGMA,
            noise_sigma: defaults::NOISE_SIGMA,
            noise_seed: defaults::SEED,
            mean_dir: String::new(),
            custom_path: String::new(),
            draws_dir: String::new(),
            target: d.target,
            score: d.score,
        }
    }
}

/// The methods the controls offer, in menu order.
pub fn method_menu() -> impl Iterator<Item = MethodKind> {
    METHODS.iter().map(|e| e.kind)
}

impl Form {
    /// The chosen method with the form's settings for it.
    pub fn method(&self) -> Method {
        match self.method {
            MethodKind::Gradient => Method::Gradient,
            MethodKind::GradientXInput => Method::GradientXInput,
            // Refined as the engine's default reading is; the step count is where it starts.
            MethodKind::IntegratedGradients if self.refine => {
                Method::refined_integrated_gradients(self.steps, defaults::IG_GAP)
            }
            MethodKind::IntegratedGradients => {
                Method::IntegratedGradients { steps: self.steps, rule: defaults::IG_FIXED_RULE, adaptive: None }
            }
            MethodKind::SmoothGrad => Method::SmoothGrad { noise: self.smooth_noise, samples: self.samples, seed: self.seed },
            MethodKind::ExpectedGradients => Method::ExpectedGradients { samples: self.samples, seed: self.seed },
            MethodKind::Occlusion => Method::Occlusion { window: self.window, stride: self.stride },
        }
    }

    /// The baseline of kind `kind` with the form's parameters, or why it cannot be used yet.
    /// `image_dir` is the folder of the current image (the default for the dataset mean).
    pub fn baseline_of(&self, kind: BaselineKind, image_dir: Option<&Path>) -> Result<Baseline, String> {
        Ok(match kind {
            BaselineKind::Black => Baseline::Black,
            BaselineKind::Grey => Baseline::Grey,
            BaselineKind::Blur => {
                if !(self.blur_sigma > 0.0) {
                    return Err("blur σ must be above 0".into());
                }
                Baseline::Blur { sigma: self.blur_sigma }
            }
            BaselineKind::UniformNoise => Baseline::UniformNoise { seed: self.noise_seed },
            BaselineKind::GaussianNoise => {
                if !(self.noise_sigma > 0.0) {
                    return Err("Gaussian noise σ must be above 0".into());
                }
                Baseline::GaussianNoise { sigma: self.noise_sigma, seed: self.noise_seed }
            }
            BaselineKind::Mean => Baseline::Mean { dir: self.folder(&self.mean_dir, image_dir, "dataset mean")? },
            BaselineKind::Image => {
                let p = self.custom_path.trim();
                if p.is_empty() {
                    return Err("custom baseline: type or pick an image path".into());
                }
                let p = PathBuf::from(p);
                if !p.is_file() {
                    return Err(format!("custom baseline: {} is not a file", p.display()));
                }
                Baseline::Image { path: p }
            }
            BaselineKind::Folder => Baseline::Folder { dir: self.folder(&self.draws_dir, image_dir, "folder of draws")? },
            BaselineKind::Value | BaselineKind::Tensor => {
                return Err(format!("the inspector does not offer the {} baseline", kind.entry().title));
            }
        })
    }

    /// A folder typed in `field`, or the current image's folder when it is empty.
    fn folder(&self, field: &str, image_dir: Option<&Path>, what: &str) -> Result<PathBuf, String> {
        let dir = if field.trim().is_empty() {
            image_dir.map(|d| d.to_path_buf()).ok_or(format!("no folder for the {what}: type one"))?
        } else {
            PathBuf::from(field.trim())
        };
        if !dir.is_dir() {
            return Err(format!("{what}: {} is not a folder", dir.display()));
        }
        Ok(dir)
    }

    /// The request for the form's method with `baseline`. Methods that take no baseline get a
    /// fixed one, so that changing the baseline control does not fill the cache with copies of
    /// the same reading.
    pub fn request_with(&self, baseline: Baseline) -> Request {
        let method = self.method();
        let baseline = if method.uses_baseline() { baseline } else { Baseline::Black };
        Request { method, baseline, target: self.target.clone(), score: self.score }
    }

    /// The form as a request with its own baseline, or why it cannot be made.
    pub fn request(&self, image_dir: Option<&Path>) -> Result<Request, String> {
        let b = if self.method.entry().uses_baseline { self.baseline_of(self.baseline, image_dir)? } else { Baseline::Black };
        if matches!(b, Baseline::Folder { .. }) && self.method != MethodKind::ExpectedGradients {
            return Err("draws from a folder suit expected gradients only; choose another baseline, or the dataset mean".into());
        }
        Ok(self.request_with(b))
    }

    /// The strip's baselines: every single-input kind the inspector offers, in order, with the
    /// reason for each that cannot be used yet (draws from a folder are many baselines, not one).
    pub fn strip_baselines(&self, image_dir: Option<&Path>) -> Vec<(BaselineKind, Result<Baseline, String>)> {
        BaselineKind::in_inspector().filter(|k| *k != BaselineKind::Folder).map(|k| (k, self.baseline_of(k, image_dir))).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn integrated_gradients_refine_by_default_and_run_fixed_when_asked() {
        let mut form = Form::default();
        let r = form.request_with(Baseline::Black);
        assert_eq!(
            r.method,
            Method::IntegratedGradients { steps: form.steps, rule: crate::methods::Rule::Midpoint, adaptive: Some(defaults::IG_GAP) }
        );
        form.refine = false;
        let r = form.request_with(Baseline::Black);
        assert_eq!(r.method, Method::IntegratedGradients { steps: form.steps, rule: defaults::IG_FIXED_RULE, adaptive: None });
    }

    #[test]
    fn expected_gradients_keep_the_chosen_baseline() {
        let form = Form { method: MethodKind::ExpectedGradients, baseline: BaselineKind::UniformNoise, ..Form::default() };
        assert_eq!(form.request(None).unwrap().baseline, Baseline::UniformNoise { seed: form.noise_seed });
        let dir = std::env::temp_dir();
        let eg = Form { baseline: BaselineKind::Folder, draws_dir: dir.display().to_string(), ..form.clone() };
        assert_eq!(eg.request(None).unwrap().baseline, Baseline::Folder { dir: dir.clone() });
        let ig = Form { method: MethodKind::IntegratedGradients, ..eg };
        assert!(ig.request(None).unwrap_err().contains("expected gradients only"));
        let form = Form { method: MethodKind::Gradient, ..form };
        assert_eq!(form.request(None).unwrap().baseline, Baseline::Black, "a method without a baseline gets a fixed one");
    }
}
