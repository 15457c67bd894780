//! Windowing: the VOI LUT (PS3.3 C.11.2) from Modality LUT output to the model's 0..1.
//!
//! The VOI functions take the output range y_min..y_max as 0..1. MONOCHROME1 images are
//! inverted after windowing (PS3.3 C.7.6.3.1.2: the minimum is displayed white), so the model
//! always sees bright as bright.
//!
//! On a feed card:
//!
//! ```toml
//! window = "file"                          # the file's first window (or VOI LUT Sequence item)
//! window = { file = 1 }                    # the file's second one
//! window = { center = 40, width = 400 }    # a fixed window, LINEAR
//! window = { center = 40, width = 400, function = "sigmoid" }   # linear | linear-exact | sigmoid
//! window = "min-max"                       # the frame's own lowest..highest value
//! window = "full-range"                    # all values the stored bits can take
//! ```

use std::fmt;

use anyhow::{Result, bail};
use ndarray::Array3;
use serde::de::{self, MapAccess, Visitor};
use serde::ser::SerializeMap;
use serde::{Deserialize, Deserializer, Serialize, Serializer};

use super::dicom::{DicomImage, LutTable};

/// VOI LUT Function (0028,1056), PS3.3 C.11.2.1.2 and C.11.2.1.3.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum VoiFunction {
    #[default]
    Linear,
    LinearExact,
    Sigmoid,
}

impl VoiFunction {
    /// From the file's text: LINEAR, LINEAR_EXACT or SIGMOID (PS3.3 C.11.2.1.3).
    pub fn from_dicom(text: &str) -> Option<VoiFunction> {
        match text.trim().to_ascii_uppercase().as_str() {
            "LINEAR" => Some(VoiFunction::Linear),
            "LINEAR_EXACT" => Some(VoiFunction::LinearExact),
            "SIGMOID" => Some(VoiFunction::Sigmoid),
            _ => None,
        }
    }

    pub fn eval(self, x: f64, center: f64, width: f64) -> f64 {
        match self {
            VoiFunction::Linear => voi_linear(x, center, width),
            VoiFunction::LinearExact => voi_linear_exact(x, center, width),
            VoiFunction::Sigmoid => voi_sigmoid(x, center, width),
        }
    }

    /// LINEAR needs a width of at least 1 (C.11.2.1.2.1), the others more than 0 (C.11.2.1.3);
    /// `fixed` has refused NaN and infinities before.
    fn check_width(self, width: f64) -> Result<()> {
        match self {
            VoiFunction::Linear if width < 1.0 => bail!(
                "the window width {width} is below 1, which the LINEAR VOI function does not allow \
                 (PS3.3 C.11.2.1.2.1): use a width of 1 or more"
            ),
            VoiFunction::LinearExact | VoiFunction::Sigmoid if width <= 0.0 => bail!(
                "the window width {width} is not above 0, which the {self:?} VOI function needs \
                 (PS3.3 C.11.2.1.3): use a positive width"
            ),
            _ => Ok(()),
        }
    }
}

/// LINEAR, PS3.3 C.11.2.1.2.1, output 0..1:
/// x ≤ c − 0.5 − (w−1)/2 → 0; x > c − 0.5 + (w−1)/2 → 1; else ((x − (c − 0.5)) / (w−1) + 0.5).
/// With w = 1 the middle case is empty: a step between c − 0.5 and above. Widths below 1 are
/// not allowed by the standard; they are taken as 1 here (`resolve` refuses them).
pub fn voi_linear(x: f64, center: f64, width: f64) -> f64 {
    let c = center - 0.5;
    let w = width.max(1.0) - 1.0;
    if x <= c - w / 2.0 {
        0.0
    } else if x > c + w / 2.0 {
        1.0
    } else {
        (x - c) / w + 0.5
    }
}

/// LINEAR_EXACT, PS3.3 C.11.2.1.3.2, output 0..1:
/// x ≤ c − w/2 → 0; x > c + w/2 → 1; else (x − c)/w + 0.5. Needs w > 0.
pub fn voi_linear_exact(x: f64, center: f64, width: f64) -> f64 {
    let w = width.max(f64::MIN_POSITIVE);
    if x <= center - w / 2.0 {
        0.0
    } else if x > center + w / 2.0 {
        1.0
    } else {
        (x - center) / w + 0.5
    }
}

/// SIGMOID, PS3.3 C.11.2.1.3.1, output 0..1: 1 / (1 + exp(−4 (x − c) / w)). Needs w > 0.
pub fn voi_sigmoid(x: f64, center: f64, width: f64) -> f64 {
    let w = width.max(f64::MIN_POSITIVE);
    1.0 / (1.0 + (-4.0 * (x - center) / w).exp())
}

/// How values become 0..1 for the model.
#[derive(Debug, Clone, PartialEq)]
pub enum Windowing {
    /// The file's window `index` (Window Center/Width with its VOI LUT Function), or its VOI LUT
    /// Sequence item `index` when it has one (as pydicom's apply_voi_lut prefers the table).
    File { index: usize },
    Fixed { center: f64, width: f64, function: VoiFunction },
    /// The frame's lowest..highest value.
    MinMax,
    /// Every value the stored bits can take after the Modality LUT; colour: 0..2^bits − 1.
    FullRange,
}

/// What a `Windowing` became for one image: enough to redo it, and to report it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ResolvedWindow {
    pub asked: Windowing,
    pub transform: VoiTransform,
    /// MONOCHROME1: 1 − y after the transform.
    pub invert: bool,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum VoiTransform {
    Function { center: f64, width: f64, function: VoiFunction },
    /// A VOI LUT Sequence item; its output is divided by 2^bits − 1.
    Table { index: usize, table: LutTable },
    /// low..high linearly onto 0..1, clamped; a flat image (low = high) gives 0.
    Range { low: f64, high: f64 },
}

impl ResolvedWindow {
    pub fn map(&self, x: f64) -> f64 {
        let y = match &self.transform {
            VoiTransform::Function { center, width, function } => function.eval(x, *center, *width),
            VoiTransform::Table { table, .. } => f64::from(table.lookup(x)) / table.max_output(),
            VoiTransform::Range { low, high } if high > low => ((x - low) / (high - low)).clamp(0.0, 1.0),
            VoiTransform::Range { .. } => 0.0,
        };
        if self.invert { 1.0 - y } else { y }
    }
}

/// Chooses the window for a DICOM image. Errors name no file: callers add the path.
pub fn resolve(image: &DicomImage, w: &Windowing) -> Result<ResolvedWindow> {
    let transform = match w {
        Windowing::File { index } => file_window(image, *index)?,
        Windowing::Fixed { center, width, function } => fixed(*center, *width, *function)?,
        Windowing::MinMax => min_max(image.values.iter().map(|&v| f64::from(v))),
        Windowing::FullRange if image.is_color() => {
            VoiTransform::Range { low: 0.0, high: 2f64.powi(i32::from(image.bits_stored)) - 1.0 }
        }
        Windowing::FullRange => VoiTransform::Range { low: image.value_range.0, high: image.value_range.1 },
    };
    Ok(ResolvedWindow { asked: w.clone(), transform, invert: image.is_inverted() })
}

/// The image's values through the window: H×W×C in 0..1.
pub fn apply(image: &DicomImage, w: &Windowing) -> Result<Array3<f32>> {
    let window = resolve(image, w)?;
    Ok(image.values.mapv(|v| window.map(f64::from(v)) as f32))
}

/// The same for a plain 16-bit image (PNG, TIFF): values 0..65535, H×W×C; with the window used.
pub fn apply_plain(values: &Array3<u16>, w: &Windowing) -> Result<(Array3<f32>, ResolvedWindow)> {
    let transform = match w {
        Windowing::File { .. } => bail!(
            "a PNG or TIFF image carries no DICOM window: use window = \"min-max\", \"full-range\" \
             or a fixed {{ center = …, width = … }}"
        ),
        Windowing::Fixed { center, width, function } => fixed(*center, *width, *function)?,
        Windowing::MinMax => min_max(values.iter().map(|&v| f64::from(v))),
        Windowing::FullRange => VoiTransform::Range { low: 0.0, high: 65535.0 },
    };
    let window = ResolvedWindow { asked: w.clone(), transform, invert: false };
    Ok((values.mapv(|v| window.map(f64::from(v)) as f32), window))
}

fn file_window(image: &DicomImage, index: usize) -> Result<VoiTransform> {
    let voi = &image.voi;
    if !voi.tables.is_empty() {
        let Some(table) = voi.tables.get(index) else {
            bail!(
                "the image has {} VOI LUT Sequence item(s); item {index} does not exist. Use \
                 window = {{ file = N }} with N below {}",
                voi.tables.len(),
                voi.tables.len()
            );
        };
        return Ok(VoiTransform::Table { index, table: table.clone() });
    }
    if voi.windows.is_empty() {
        bail!(
            "the image has no window (Window Center/Width) and no VOI LUT Sequence: use window = \
             \"min-max\", \"full-range\" or a fixed {{ center = …, width = … }}"
        );
    }
    let Some(setting) = voi.windows.get(index) else {
        bail!(
            "the image has {} window(s); window {index} does not exist. Use window = {{ file = N }} \
             with N below {}",
            voi.windows.len(),
            voi.windows.len()
        );
    };
    let function = match &voi.function {
        Ok(f) => *f,
        Err(text) => bail!(
            "the image's VOI LUT Function is '{text}', which is none of LINEAR, LINEAR_EXACT or \
             SIGMOID (PS3.3 C.11.2.1.3): give a fixed window with its function instead"
        ),
    };
    fixed(setting.center, setting.width, function)
}

fn fixed(center: f64, width: f64, function: VoiFunction) -> Result<VoiTransform> {
    if !center.is_finite() || !width.is_finite() {
        bail!("the window center {center} / width {width} is not a pair of finite numbers");
    }
    function.check_width(width)?;
    Ok(VoiTransform::Function { center, width, function })
}

fn min_max(values: impl Iterator<Item = f64>) -> VoiTransform {
    let (low, high) = values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| (lo.min(v), hi.max(v)));
    if low > high { VoiTransform::Range { low: 0.0, high: 0.0 } } else { VoiTransform::Range { low, high } }
}

// ---------------------------------------------------------------------------------------------
// The feed card form: a name ("file", "min-max", "full-range") or a table ({ file = N } or
// { center, width, function }).

const NAMES: &str = "\"file\", \"min-max\" or \"full-range\"";
const KEYS: &str = "file, or center, width and function";

impl Serialize for Windowing {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        match self {
            Windowing::File { index: 0 } => s.serialize_str("file"),
            Windowing::MinMax => s.serialize_str("min-max"),
            Windowing::FullRange => s.serialize_str("full-range"),
            Windowing::File { index } => {
                let mut map = s.serialize_map(Some(1))?;
                map.serialize_entry("file", index)?;
                map.end()
            }
            Windowing::Fixed { center, width, function } => {
                let mut map = s.serialize_map(Some(3))?;
                map.serialize_entry("center", center)?;
                map.serialize_entry("width", width)?;
                map.serialize_entry("function", function)?;
                map.end()
            }
        }
    }
}

impl<'de> Deserialize<'de> for Windowing {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Windowing, D::Error> {
        d.deserialize_any(WindowingVisitor)
    }
}

struct WindowingVisitor;

impl<'de> Visitor<'de> for WindowingVisitor {
    type Value = Windowing;

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        write!(f, "{NAMES}, or a table with {KEYS}")
    }

    fn visit_str<E: de::Error>(self, v: &str) -> std::result::Result<Windowing, E> {
        match v {
            "file" => Ok(Windowing::File { index: 0 }),
            "min-max" => Ok(Windowing::MinMax),
            "full-range" => Ok(Windowing::FullRange),
            other => Err(E::custom(format!(
                "window = \"{other}\" is not known: use {NAMES}, or {{ center = …, width = … }}"
            ))),
        }
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> std::result::Result<Windowing, A::Error> {
        let (mut file, mut center, mut width, mut function) = (None, None, None, None);
        while let Some(key) = map.next_key::<String>()? {
            match key.as_str() {
                "file" => file = Some(map.next_value::<usize>()?),
                "center" => center = Some(map.next_value::<f64>()?),
                "width" => width = Some(map.next_value::<f64>()?),
                "function" => function = Some(map.next_value::<VoiFunction>()?),
                other => return Err(de::Error::custom(format!("window has no key '{other}': its keys are {KEYS}"))),
            }
        }
        match (file, center, width) {
            (Some(index), None, None) if function.is_none() => Ok(Windowing::File { index }),
            (None, Some(center), Some(width)) => {
                Ok(Windowing::Fixed { center, width, function: function.unwrap_or_default() })
            }
            (Some(_), _, _) => Err(de::Error::custom(
                "window = { file = N } takes no center, width or function: the file's window brings its own",
            )),
            _ => Err(de::Error::custom("a fixed window needs both center and width, e.g. { center = 40, width = 400 }")),
        }
    }
}
