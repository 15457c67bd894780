//! The two tables every front end reads: the attribution methods and the baselines, each with
//! its text form, its name for people and what it needs. The CLI's parsing, help and errors,
//! the inspector's menus and the strip's labels all come from here, so a method or a baseline
//! is named in one place.

/// The kinds of attribution method (their settings live in [`super::Method`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum MethodKind {
    IntegratedGradients,
    Occlusion,
    Gradient,
    GradientXInput,
    SmoothGrad,
    ExpectedGradients,
}

/// One method as the front ends name it.
#[derive(Clone, Copy, Debug)]
pub struct MethodEntry {
    pub kind: MethodKind,
    /// The text form: `--method NAME`, and `method` in reading.json.
    pub name: &'static str,
    /// Other spellings `--method` accepts.
    pub aliases: &'static [&'static str],
    /// The name shown to people (menus, titles).
    pub title: &'static str,
    /// Whether the result depends on a baseline.
    pub uses_baseline: bool,
    /// Whether the baseline strip compares it across baselines (methods whose baseline is one
    /// reference input; expected gradients draws many).
    pub in_strip: bool,
    /// Whether it needs the reverse pass.
    pub needs_gradient: bool,
}

/// Every method, in the order menus and help list them.
pub const METHODS: [MethodEntry; 6] = [
    MethodEntry {
        kind: MethodKind::IntegratedGradients,
        name: "integrated-gradients",
        aliases: &["ig"],
        title: "integrated gradients",
        uses_baseline: true,
        in_strip: true,
        needs_gradient: true,
    },
    MethodEntry {
        kind: MethodKind::Occlusion,
        name: "occlusion",
        aliases: &[],
        title: "occlusion",
        uses_baseline: true,
        in_strip: true,
        needs_gradient: false,
    },
    MethodEntry {
        kind: MethodKind::Gradient,
        name: "gradient",
        aliases: &["saliency"],
        title: "gradient",
        uses_baseline: false,
        in_strip: false,
        needs_gradient: true,
    },
    MethodEntry {
        kind: MethodKind::GradientXInput,
        name: "gradient-x-input",
        aliases: &[],
        title: "gradient × input",
        uses_baseline: false,
        in_strip: false,
        needs_gradient: true,
    },
    MethodEntry {
        kind: MethodKind::SmoothGrad,
        name: "smoothgrad",
        aliases: &[],
        title: "SmoothGrad",
        uses_baseline: false,
        in_strip: false,
        needs_gradient: true,
    },
    MethodEntry {
        kind: MethodKind::ExpectedGradients,
        name: "expected-gradients",
        aliases: &["eg"],
        title: "expected gradients",
        uses_baseline: true,
        in_strip: false,
        needs_gradient: true,
    },
];

impl MethodKind {
    pub fn entry(self) -> &'static MethodEntry {
        METHODS.iter().find(|e| e.kind == self).expect("every method kind is in METHODS")
    }

    /// The kind named `s` (its name or an alias).
    pub fn parse(s: &str) -> Option<MethodKind> {
        METHODS.iter().find(|e| e.name == s || e.aliases.contains(&s)).map(|e| e.kind)
    }
}

/// The method names joined for help and error texts: `a | b | c`.
pub fn method_names() -> String {
    METHODS.iter().map(|e| e.name).collect::<Vec<_>>().join(" | ")
}

/// The kinds of baseline (their parameters live in [`super::Baseline`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum BaselineKind {
    Black,
    Grey,
    Value,
    Blur,
    UniformNoise,
    GaussianNoise,
    Mean,
    Image,
    Tensor,
    Folder,
}

/// One baseline as the front ends name it.
#[derive(Clone, Copy, Debug)]
pub struct BaselineEntry {
    pub kind: BaselineKind,
    /// The text form's head: `blur` in `blur:8`.
    pub head: &'static str,
    /// Other heads the text form accepts.
    pub aliases: &'static [&'static str],
    /// The whole text form with its parameters named, for help: `blur:SIGMA`.
    pub form: &'static str,
    /// The name shown to people (menus).
    pub title: &'static str,
    /// A short name for narrow places (the agreement matrix).
    pub short: &'static str,
    /// Whether each draw differs, so expected gradients resamples it.
    pub distribution: bool,
    /// Whether the inspector offers it (menus and the baseline strip, in this order).
    pub in_inspector: bool,
    /// Whether it works on a raw tensor (`--tensor`), with no feed card.
    pub on_tensor: bool,
}

/// Every baseline, in the order menus, the strip and help list them.
pub const BASELINES: [BaselineEntry; 10] = [
    BaselineEntry {
        kind: BaselineKind::Black,
        head: "black",
        aliases: &["zero", "zeros"],
        form: "black",
        title: "black",
        short: "black",
        distribution: false,
        in_inspector: true,
        on_tensor: true,
    },
    BaselineEntry {
        kind: BaselineKind::Grey,
        head: "grey",
        aliases: &["gray"],
        form: "grey",
        title: "grey",
        short: "grey",
        distribution: false,
        in_inspector: true,
        on_tensor: true,
    },
    BaselineEntry {
        kind: BaselineKind::Value,
        head: "value",
        aliases: &[],
        form: "value:V",
        title: "constant value",
        short: "value",
        distribution: false,
        in_inspector: false,
        on_tensor: true,
    },
    BaselineEntry {
        kind: BaselineKind::Blur,
        head: "blur",
        aliases: &[],
        form: "blur:SIGMA",
        title: "blur",
        short: "blur",
        distribution: false,
        in_inspector: true,
        on_tensor: true,
    },
    BaselineEntry {
        kind: BaselineKind::UniformNoise,
        head: "uniform-noise",
        aliases: &[],
        form: "uniform-noise:SEED",
        title: "uniform noise",
        short: "uniform",
        distribution: true,
        in_inspector: true,
        on_tensor: true,
    },
    BaselineEntry {
        kind: BaselineKind::GaussianNoise,
        head: "gaussian-noise",
        aliases: &[],
        form: "gaussian-noise:SIGMA:SEED",
        title: "Gaussian noise",
        short: "Gauss",
        distribution: true,
        in_inspector: true,
        on_tensor: true,
    },
    BaselineEntry {
        kind: BaselineKind::Mean,
        head: "mean",
        aliases: &[],
        form: "mean:DIR",
        title: "dataset mean",
        short: "mean",
        distribution: false,
        in_inspector: true,
        on_tensor: false,
    },
    BaselineEntry {
        kind: BaselineKind::Image,
        head: "image",
        aliases: &[],
        form: "image:PATH",
        title: "custom image",
        short: "custom",
        distribution: false,
        in_inspector: true,
        on_tensor: false,
    },
    BaselineEntry {
        kind: BaselineKind::Tensor,
        head: "tensor",
        aliases: &[],
        form: "tensor:PATH.npy",
        title: "tensor file",
        short: "tensor",
        distribution: false,
        in_inspector: false,
        on_tensor: true,
    },
    BaselineEntry {
        kind: BaselineKind::Folder,
        head: "folder",
        aliases: &[],
        form: "folder:DIR",
        title: "draws from a folder",
        short: "folder",
        distribution: true,
        in_inspector: true,
        on_tensor: false,
    },
];

impl BaselineKind {
    pub fn entry(self) -> &'static BaselineEntry {
        BASELINES.iter().find(|e| e.kind == self).expect("every baseline kind is in BASELINES")
    }

    /// The kind whose text form starts with `head`.
    pub fn from_head(head: &str) -> Option<BaselineKind> {
        BASELINES.iter().find(|e| e.head == head || e.aliases.contains(&head)).map(|e| e.kind)
    }

    /// The kinds the inspector offers, in order.
    pub fn in_inspector() -> impl Iterator<Item = BaselineKind> {
        BASELINES.iter().filter(|e| e.in_inspector).map(|e| e.kind)
    }
}

/// The baseline text forms joined for help and error texts: `black | grey | value:V | …`.
pub fn baseline_forms() -> String {
    BASELINES.iter().map(|e| e.form).collect::<Vec<_>>().join(" | ")
}

/// The forms that work on a raw tensor, joined with commas (for the error that refuses others).
pub fn tensor_baseline_forms() -> String {
    let f: Vec<&str> = BASELINES.iter().filter(|e| e.on_tensor).map(|e| e.form).collect();
    match f.split_last() {
        Some((last, rest)) if !rest.is_empty() => format!("{} or {last}", rest.join(", ")),
        _ => f.join(""),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_kind_has_one_entry_and_names_are_unique() {
        let mut names: Vec<&str> = METHODS.iter().flat_map(|e| std::iter::once(e.name).chain(e.aliases.iter().copied())).collect();
        let n = names.len();
        names.sort();
        names.dedup();
        assert_eq!(names.len(), n, "a method name or alias is used twice");
        for e in &METHODS {
            assert_eq!(MethodKind::parse(e.name), Some(e.kind));
            assert_eq!(e.kind.entry().name, e.name);
        }
        let mut heads: Vec<&str> = BASELINES.iter().flat_map(|e| std::iter::once(e.head).chain(e.aliases.iter().copied())).collect();
        let n = heads.len();
        heads.sort();
        heads.dedup();
        assert_eq!(heads.len(), n, "a baseline head or alias is used twice");
        for e in &BASELINES {
            assert!(e.form.starts_with(e.head), "{} does not start with its head", e.form);
            assert_eq!(BaselineKind::from_head(e.head), Some(e.kind));
            assert_eq!(e.kind.entry().head, e.head);
        }
    }

    #[test]
    fn forms_read_as_help_text() {
        assert!(baseline_forms().starts_with("black | grey | value:V | blur:SIGMA"));
        assert_eq!(
            tensor_baseline_forms(),
            "black, grey, value:V, blur:SIGMA, uniform-noise:SEED, gaussian-noise:SIGMA:SEED or tensor:PATH.npy"
        );
    }
}
