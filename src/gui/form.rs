//! What the reading controls edit, and how it becomes an engine request.
//!
//! The form keeps every parameter of every choice (so switching method and back keeps the steps
//! the user typed); only the ones the chosen method and baseline use go into the request.

use std::path::PathBuf;

/// Attribution methods offered in the controls (published names).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum MethodChoice {
    Gradient,
    GradientXInput,
    IntegratedGradients,
    SmoothGrad,
    ExpectedGradients,
    Occlusion,
}

impl MethodChoice {
    pub const ALL: [MethodChoice; 6] = [
        MethodChoice::IntegratedGradients,
        MethodChoice::Gradient,
        MethodChoice::GradientXInput,
        MethodChoice::SmoothGrad,
        MethodChoice::ExpectedGradients,
        MethodChoice::Occlusion,
    ];

    pub fn name(self) -> &'static str {
        match self {
            MethodChoice::Gradient => "gradient",
            MethodChoice::GradientXInput => "gradient × input",
            MethodChoice::IntegratedGradients => "integrated gradients",
            MethodChoice::SmoothGrad => "SmoothGrad",
            MethodChoice::ExpectedGradients => "expected gradients",
            MethodChoice::Occlusion => "occlusion",
        }
    }

    /// Whether the method's result depends on a baseline (the strip only makes sense then).
    pub fn takes_baseline(self) -> bool {
        matches!(self, MethodChoice::IntegratedGradients | MethodChoice::Occlusion)
    }
}

/// Baselines offered in the controls and the strip.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum BaselineChoice {
    Black,
    Grey,
    Blur,
    UniformNoise,
    GaussianNoise,
    DatasetMean,
    Custom,
}

impl BaselineChoice {
    pub const ALL: [BaselineChoice; 7] = [
        BaselineChoice::Black,
        BaselineChoice::Grey,
        BaselineChoice::Blur,
        BaselineChoice::UniformNoise,
        BaselineChoice::GaussianNoise,
        BaselineChoice::DatasetMean,
        BaselineChoice::Custom,
    ];

    pub fn name(self) -> &'static str {
        match self {
            BaselineChoice::Black => "black",
            BaselineChoice::Grey => "grey",
            BaselineChoice::Blur => "blur",
            BaselineChoice::UniformNoise => "uniform noise",
            BaselineChoice::GaussianNoise => "Gaussian noise",
            BaselineChoice::DatasetMean => "dataset mean",
            BaselineChoice::Custom => "custom image",
        }
    }
}

/// The class a reading explains.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Default)]
pub enum TargetChoice {
    /// Whatever class scores highest on this image.
    #[default]
    Top,
    Index(usize),
}

/// Which score the reading differentiates (mirrors the engine's score kinds).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Default)]
pub enum ScoreChoice {
    /// The model's output 0 as it is.
    #[default]
    Raw,
    Softmax,
    Logits,
}

impl ScoreChoice {
    pub const ALL: [ScoreChoice; 3] = [ScoreChoice::Raw, ScoreChoice::Softmax, ScoreChoice::Logits];
    pub fn name(self) -> &'static str {
        match self {
            ScoreChoice::Raw => "output as given",
            ScoreChoice::Softmax => "softmax probability",
            ScoreChoice::Logits => "logit (before softmax)",
        }
    }
}

/// The inspector's default baseline is a blur of this σ (model-grid pixels); see [`DEFAULT_BASELINE_WHY`].
pub const DEFAULT_BLUR_SIGMA: f32 = 8.0;

/// Why the inspector starts on blur σ 8 rather than black (its tooltip).
pub const DEFAULT_BASELINE_WHY: &str = "The inspector starts on blur σ 8. A black baseline equals the dark frame \
of marked images: there x − x′ = 0, so integrated gradients gives the frame no attribution and the \
suspect flag can miss a frame shortcut. Blur keeps the picture's coarse content and removes the fine detail a tag \
or frame adds. Measured on the demo set: integrated gradients with blur σ 8 flag 6 of 6 Hillmoor images with a \
finding under the shortcut model and 0 of 6 under the control; with black the frame gets nothing.";

/// The short line under the baseline control when black is chosen.
pub const BLACK_BASELINE_CAVEAT: &str = "black = the dark frame: x − x′ = 0 there, so a frame shortcut gets no attribution";

/// Everything the reading controls edit.
#[derive(Clone, Debug, PartialEq)]
pub struct Form {
    pub method: MethodChoice,
    pub steps: usize,
    /// Integrated gradients: refine from `steps` until the completeness gap is under 1%.
    pub refine: bool,
    pub samples: usize,
    pub smooth_noise: f32,
    pub seed: u64,
    pub window: usize,
    pub stride: usize,
    pub baseline: BaselineChoice,
    pub blur_sigma: f32,
    pub noise_sigma: f32,
    pub noise_seed: u64,
    /// Folder the dataset mean is taken over ("" = the folder of the current image).
    pub mean_dir: String,
    /// Image used as the custom baseline ("" = none chosen yet).
    pub custom_path: String,
    pub target: TargetChoice,
    pub score: ScoreChoice,
}

impl Default for Form {
    fn default() -> Self {
        Form {
            method: MethodChoice::IntegratedGradients,
            steps: 32,
            refine: true,
            samples: 16,
            smooth_noise: 0.15,
            seed: 7,
            window: 16,
            stride: 8,
            baseline: BaselineChoice::Blur,
            blur_sigma: DEFAULT_BLUR_SIGMA,
            noise_sigma: 0.2,
            noise_seed: 7,
            mean_dir: String::new(),
            custom_path: String::new(),
            target: TargetChoice::Top,
            score: ScoreChoice::Raw,
        }
    }
}

/// A form turned into plain words the engine parses, plus the folder context it needs.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub struct Ask {
    pub method: MethodChoice,
    /// Method parameters that matter for the chosen method only (cache key material).
    pub method_params: Vec<(&'static str, String)>,
    pub baseline: BaselineSpec,
    pub target: TargetChoice,
    pub score: ScoreChoice,
}

/// A baseline with its resolved parameter.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub enum BaselineSpec {
    Black,
    Grey,
    /// σ in image pixels, kept as text so the key is exact.
    Blur(String),
    UniformNoise(u64),
    GaussianNoise(String, u64),
    Mean(PathBuf),
    Image(PathBuf),
}

impl BaselineSpec {
    pub fn choice(&self) -> BaselineChoice {
        match self {
            BaselineSpec::Black => BaselineChoice::Black,
            BaselineSpec::Grey => BaselineChoice::Grey,
            BaselineSpec::Blur(_) => BaselineChoice::Blur,
            BaselineSpec::UniformNoise(_) => BaselineChoice::UniformNoise,
            BaselineSpec::GaussianNoise(..) => BaselineChoice::GaussianNoise,
            BaselineSpec::Mean(_) => BaselineChoice::DatasetMean,
            BaselineSpec::Image(_) => BaselineChoice::Custom,
        }
    }

    /// Short label for strip tiles and file names.
    pub fn label(&self) -> String {
        match self {
            BaselineSpec::Black => "black".into(),
            BaselineSpec::Grey => "grey".into(),
            BaselineSpec::Blur(s) => format!("blur σ {s}"),
            BaselineSpec::UniformNoise(seed) => format!("uniform noise #{seed}"),
            BaselineSpec::GaussianNoise(s, seed) => format!("Gaussian σ {s} #{seed}"),
            BaselineSpec::Mean(_) => "dataset mean".into(),
            BaselineSpec::Image(p) => format!("custom: {}", super::short_name(p)),
        }
    }
}

fn num(v: f32) -> String {
    // Shortest text that round-trips, so "4" not "4.0000".
    format!("{v}")
}

impl Form {
    /// The baseline the form names, or why it cannot be used yet. `image_dir` is the folder of
    /// the current image (the default for the dataset mean).
    pub fn baseline_spec(&self, choice: BaselineChoice, image_dir: Option<&std::path::Path>) -> Result<BaselineSpec, String> {
        Ok(match choice {
            BaselineChoice::Black => BaselineSpec::Black,
            BaselineChoice::Grey => BaselineSpec::Grey,
            BaselineChoice::Blur => {
                if !(self.blur_sigma > 0.0) {
                    return Err("blur σ must be above 0".into());
                }
                BaselineSpec::Blur(num(self.blur_sigma))
            }
            BaselineChoice::UniformNoise => BaselineSpec::UniformNoise(self.noise_seed),
            BaselineChoice::GaussianNoise => {
                if !(self.noise_sigma > 0.0) {
                    return Err("Gaussian noise σ must be above 0".into());
                }
                BaselineSpec::GaussianNoise(num(self.noise_sigma), self.noise_seed)
            }
            BaselineChoice::DatasetMean => {
                let dir = if self.mean_dir.trim().is_empty() {
                    image_dir.map(|d| d.to_path_buf()).ok_or("no folder for the dataset mean: type one")?
                } else {
                    PathBuf::from(self.mean_dir.trim())
                };
                if !dir.is_dir() {
                    return Err(format!("dataset mean: {} is not a folder", dir.display()));
                }
                BaselineSpec::Mean(dir)
            }
            BaselineChoice::Custom => {
                let p = self.custom_path.trim();
                if p.is_empty() {
                    return Err("custom baseline: type or pick an image path".into());
                }
                let p = PathBuf::from(p);
                if !p.is_file() {
                    return Err(format!("custom baseline: {} is not a file", p.display()));
                }
                BaselineSpec::Image(p)
            }
        })
    }

    /// The form as an [`Ask`] for the given baseline.
    pub fn ask_with(&self, baseline: BaselineSpec) -> Ask {
        let method_params = match self.method {
            MethodChoice::Gradient | MethodChoice::GradientXInput => vec![],
            MethodChoice::IntegratedGradients => {
                vec![("steps", self.steps.to_string()), ("refine", self.refine.to_string())]
            }
            MethodChoice::SmoothGrad => vec![
                ("samples", self.samples.to_string()),
                ("noise", num(self.smooth_noise)),
                ("seed", self.seed.to_string()),
            ],
            MethodChoice::ExpectedGradients => {
                vec![("samples", self.samples.to_string()), ("seed", self.seed.to_string())]
            }
            MethodChoice::Occlusion => {
                vec![("window", self.window.to_string()), ("stride", self.stride.to_string())]
            }
        };
        // Methods without a baseline get a fixed one so that changing the baseline control does
        // not fill the cache with copies of the same reading.
        let baseline = if self.method.takes_baseline() || self.method == MethodChoice::ExpectedGradients {
            baseline
        } else {
            BaselineSpec::Black
        };
        Ask { method: self.method, method_params, baseline, target: self.target, score: self.score }
    }

    /// The form as an [`Ask`] with its own baseline.
    pub fn ask(&self, image_dir: Option<&std::path::Path>) -> Result<Ask, String> {
        let b = if self.method.takes_baseline() {
            self.baseline_spec(self.baseline, image_dir)?
        } else {
            BaselineSpec::Black
        };
        Ok(self.ask_with(b))
    }

    /// The strip's baselines: every kind the form can resolve, in a fixed order, with the reason
    /// for each that cannot be used yet.
    pub fn strip_specs(&self, image_dir: Option<&std::path::Path>) -> Vec<(BaselineChoice, Result<BaselineSpec, String>)> {
        BaselineChoice::ALL.iter().map(|&c| (c, self.baseline_spec(c, image_dir))).collect()
    }
}

impl Ask {
    /// One line describing the reading, for tiles, tooltips and file names.
    pub fn describe(&self) -> String {
        let refined = self.method_params.iter().any(|(k, v)| *k == "refine" && v == "true");
        let params: Vec<String> = self
            .method_params
            .iter()
            .filter_map(|(k, v)| match (*k, refined) {
                ("refine", true) => Some("refined to a 1 % gap".to_string()),
                ("refine", false) => None,
                ("steps", true) => Some(format!("from {v} steps")),
                _ => Some(format!("{k} {v}")),
            })
            .collect();
        let mut s = self.method.name().to_string();
        if !params.is_empty() {
            s.push_str(&format!(" ({})", params.join(", ")));
        }
        if self.method.takes_baseline() {
            s.push_str(&format!(", baseline {}", self.baseline.label()));
        }
        s
    }
}
