//! The marks no finder was first written for (see the scenario): Fellbrook's bare side letter
//! in a corner that changes from image to image and its small ruler along one edge, and the
//! Hillmoor senior reader's thin bright ring around a finding or arrow pointing at it.
//!
//! Like the rest of the phantom, every pixel is decided with exact IEEE operations on f32
//! (no sqrt, sin or cos: distances are compared squared, directions come from a table), and each
//! mark has its own random stream, so adding a mark leaves every other pixel of the image as it
//! was. Each mark is drawn at one grey level outside the film's range, so its mask is exactly
//! the pixels it changes.

use std::fmt;
use std::str::FromStr;

use anyhow::{Result, bail};
use ndarray::Array2;
use rand::Rng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use super::font;

/// Grey levels of the new marks: above [`super::FILM_MAX`], below the tag's 255, and distinct,
/// so a picture alone tells which mark a pixel belongs to.
pub const LETTER_LEVEL: u8 = 250;
pub const RULER_LEVEL: u8 = 245;
pub const ANNOTATION_LEVEL: u8 = 252;

/// A corner of the image, for Fellbrook's side letter.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Corner {
    TopLeft,
    TopRight,
    BottomLeft,
    BottomRight,
}

/// An edge of the image, for Fellbrook's ruler.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Edge {
    Top,
    Bottom,
    Left,
    Right,
}

/// What the Hillmoor reader drew on a finding.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Annotation {
    #[default]
    None,
    /// A thin bright circle around the finding.
    Ring,
    /// An arrow pointing at the finding.
    Arrow,
}

macro_rules! named {
    ($t:ty, $what:literal, $($v:ident = $s:literal),+) => {
        impl $t {
            pub fn name(self) -> &'static str { match self { $(Self::$v => $s),+ } }
        }
        impl fmt::Display for $t {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result { f.write_str(self.name()) }
        }
        impl FromStr for $t {
            type Err = anyhow::Error;
            fn from_str(s: &str) -> Result<Self> {
                match s.trim() {
                    $($s => Ok(Self::$v),)+
                    other => bail!("unknown {} '{other}': use one of {}", $what, [$($s),+].join(", ")),
                }
            }
        }
    };
}
named!(Corner, "corner", TopLeft = "top-left", TopRight = "top-right", BottomLeft = "bottom-left", BottomRight = "bottom-right");
named!(Edge, "edge", Top = "top", Bottom = "bottom", Left = "left", Right = "right");
named!(Annotation, "annotation", None = "none", Ring = "ring", Arrow = "arrow");

/// An optional corner or edge in a manifest: its name, or `none`.
pub fn name_or_none<T: fmt::Display>(v: Option<T>) -> String {
    v.map_or_else(|| "none".to_string(), |v| v.to_string())
}

/// Parses what [`name_or_none`] writes.
pub fn parse_or_none<T: FromStr<Err = anyhow::Error>>(s: &str) -> Result<Option<T>> {
    if s.trim() == "none" { Ok(None) } else { s.parse().map(Some) }
}

/// Draws `letter` bare (no plate) into a corner picked from `rng`, inset a few pixels that also
/// vary. `avoid` is a corner another mark holds (the tag's). Returns the corner used.
pub(crate) fn side_letter(
    image: &mut Array2<u8>,
    mask: &mut Array2<bool>,
    letter: char,
    avoid: Option<Corner>,
    rng: &mut ChaCha8Rng,
) -> Corner {
    let n = image.dim().0;
    let s = n as f32 / 256.0;
    let corners = [Corner::TopLeft, Corner::TopRight, Corner::BottomLeft, Corner::BottomRight];
    let mut corner = corners[rng.random_range(0..4usize)];
    if Some(corner) == avoid {
        corner = Corner::BottomRight;
    }
    let scale = ((4.0 * s).round() as usize).max(1);
    let (lw, lh) = (font::tag_width(&letter.to_string(), scale), font::tag_height(scale));
    // Inside where a frame would be (4 px at 256), so letter and frame never overlap.
    let inset = |r: &mut ChaCha8Rng| (((6.0 + r.random_range(0.0f32..8.0)) * s).round() as usize).max(1);
    let (ix, iy) = (inset(rng), inset(rng));
    let x0 = match corner {
        Corner::TopLeft | Corner::BottomLeft => ix,
        _ => n.saturating_sub(ix + lw),
    };
    let y0 = match corner {
        Corner::TopLeft | Corner::TopRight => iy,
        _ => n.saturating_sub(iy + lh),
    };
    font::for_each_lit(&letter.to_string(), x0, y0, scale, |x, y| {
        if x < n && y < n {
            mask[[y, x]] = true;
            image[[y, x]] = LETTER_LEVEL;
        }
    });
    corner
}

/// Draws a ruler along an edge picked from `rng`: a line parallel to the edge with ticks every
/// 8 px (at 256) pointing inward, every fourth one twice as long. It lies in the middle of the
/// edge (from 30 % to 30 % + 0.35 of the side, shifted a little), clear of the corners where the
/// letter and the tag go. Returns the edge used.
pub(crate) fn ruler(image: &mut Array2<u8>, mask: &mut Array2<bool>, rng: &mut ChaCha8Rng) -> Edge {
    let n = image.dim().0;
    let s = n as f32 / 256.0;
    let edge = [Edge::Top, Edge::Bottom, Edge::Left, Edge::Right][rng.random_range(0..4usize)];
    let start = ((0.30 + rng.random_range(0.0f32..0.05)) * n as f32).round() as usize;
    let len = (0.35 * n as f32).round() as usize;
    let inset = ((6.0 * s).round() as usize).max(1);
    let thick = ((1.0 * s).round() as usize).max(1);
    let step = ((8.0 * s).round() as usize).max(2);
    let (short, long) = (((4.0 * s).round() as usize).max(1), ((8.0 * s).round() as usize).max(2));
    // (along, depth from the edge) → pixel; depth grows inward.
    let mut put = |along: usize, depth: usize| {
        if along >= n || depth >= n {
            return;
        }
        let (x, y) = match edge {
            Edge::Top => (along, depth),
            Edge::Bottom => (along, n - 1 - depth),
            Edge::Left => (depth, along),
            Edge::Right => (n - 1 - depth, along),
        };
        mask[[y, x]] = true;
        image[[y, x]] = RULER_LEVEL;
    };
    for a in start..start + len {
        for t in 0..thick {
            put(a, inset + t);
        }
    }
    for (k, a) in (start..start + len).step_by(step).enumerate() {
        let reach = if k % 4 == 0 { long } else { short };
        for d in 0..reach {
            for t in 0..thick {
                put(a + t, inset + thick + d);
            }
        }
    }
    edge
}

/// Unit directions every 45°, and the cosine and sine of 30° for the arrow's head (constants:
/// no trigonometry at run time).
const DIRS: [(f32, f32); 8] = [
    (1.0, 0.0),
    (0.707_106_77, 0.707_106_77),
    (0.0, 1.0),
    (-0.707_106_77, 0.707_106_77),
    (-1.0, 0.0),
    (-0.707_106_77, -0.707_106_77),
    (0.0, -1.0),
    (0.707_106_77, -0.707_106_77),
];
const COS30: f32 = 0.866_025_4;
const SIN30: f32 = 0.5;

/// Squared distance from (u, v) to the segment a–b.
fn segment_d2(u: f32, v: f32, a: (f32, f32), b: (f32, f32)) -> f32 {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let len2 = dx * dx + dy * dy;
    let t = if len2 > 0.0 { (((u - a.0) * dx + (v - a.1) * dy) / len2).clamp(0.0, 1.0) } else { 0.0 };
    let (px, py) = (a.0 + t * dx - u, a.1 + t * dy - v);
    px * px + py * py
}

/// Draws the reader's mark around a finding at (`cx`, `cy`) with radius `r`, in the phantom's
/// 256-pixel reference units. A ring is a circle about 1.5 px thick a few pixels outside the
/// finding; an arrow is a 22 px shaft from one of eight directions with a two-stroke head whose
/// tip stops short of the finding.
pub(crate) fn annotation(
    image: &mut Array2<u8>,
    mask: &mut Array2<bool>,
    what: Annotation,
    (cx, cy, r): (f32, f32, f32),
    rng: &mut ChaCha8Rng,
) {
    let n = image.dim().0;
    let s = n as f32 / 256.0;
    let half = 0.8f32;
    let inside: Box<dyn Fn(f32, f32) -> bool> = match what {
        Annotation::None => return,
        Annotation::Ring => {
            let radius = 1.5 * r + 3.0 + rng.random_range(0.0f32..3.0);
            let (lo, hi) = ((radius - half) * (radius - half), (radius + half) * (radius + half));
            Box::new(move |u, v| {
                let d2 = (u - cx) * (u - cx) + (v - cy) * (v - cy);
                d2 >= lo && d2 <= hi
            })
        }
        Annotation::Arrow => {
            let (dx, dy) = DIRS[rng.random_range(0..8usize)];
            let gap = r + 3.0;
            let tip = (cx + dx * gap, cy + dy * gap);
            let tail = (tip.0 + dx * 22.0, tip.1 + dy * 22.0);
            // The head's strokes run back from the tip at ±30° around the shaft.
            let arm = |sign: f32| (dx * COS30 - sign * dy * SIN30, sign * dx * SIN30 + dy * COS30);
            let (a1, a2) = (arm(1.0), arm(-1.0));
            let h1 = (tip.0 + a1.0 * 7.0, tip.1 + a1.1 * 7.0);
            let h2 = (tip.0 + a2.0 * 7.0, tip.1 + a2.1 * 7.0);
            let w2 = half * half;
            Box::new(move |u, v| segment_d2(u, v, tip, tail) <= w2 || segment_d2(u, v, tip, h1) <= w2 || segment_d2(u, v, tip, h2) <= w2)
        }
    };
    for y in 0..n {
        let v = (y as f32 + 0.5) / s;
        for x in 0..n {
            let u = (x as f32 + 0.5) / s;
            if inside(u, v) {
                mask[[y, x]] = true;
                image[[y, x]] = ANNOTATION_LEVEL;
            }
        }
    }
}

/// Which mark a [`Planted`] rule puts on images.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PlantedKind {
    /// The bare side letter in a changing corner.
    Letter,
    /// The reader's thin ring (around the finding, or around a place in a lung on a negative).
    Ring,
    /// The ticked ruler along one edge.
    Ruler,
    /// The reader's arrow (likewise).
    Arrow,
}
named!(PlantedKind, "planted mark", Letter = "letter", Ring = "ring", Ruler = "ruler", Arrow = "arrow");

impl PlantedKind {
    pub const ALL: [PlantedKind; 4] = [PlantedKind::Letter, PlantedKind::Ring, PlantedKind::Ruler, PlantedKind::Arrow];
}

/// A mark put on images by their label instead of by a site's habit, to make models that use
/// it (a shortcut: on most positives, few negatives) and models that cannot (a control: the
/// same share of every class). Whether image i carries it is one draw from a stream of its own
/// compared with the share of its class, so the same seed with other shares gives the very same
/// images with the mark on others (shares 0 and 0: the same images without it).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Planted {
    pub kind: PlantedKind,
    /// Share of the images with a finding that carry the mark, 0..1.
    pub positive: f32,
    /// Share of the images without one that carry it, 0..1.
    pub negative: f32,
}

impl fmt::Display for Planted {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}:{}:{}", self.kind, self.positive, self.negative)
    }
}

impl FromStr for Planted {
    type Err = anyhow::Error;
    /// `KIND:POSITIVE:NEGATIVE`, e.g. `ring:0.9:0.1`.
    fn from_str(s: &str) -> Result<Self> {
        let parts: Vec<&str> = s.split(':').map(str::trim).collect();
        let [kind, pos, neg] = parts[..] else {
            bail!("planted mark '{s}' should be KIND:POSITIVE:NEGATIVE, e.g. ring:0.9:0.1 (the shares of positives and of negatives that carry it)")
        };
        let share = |v: &str, what: &str| -> Result<f32> {
            match v.parse::<f32>() {
                Ok(x) if (0.0..=1.0).contains(&x) => Ok(x),
                _ => bail!("planted mark '{s}': the share of {what} '{v}' should be a number from 0 to 1"),
            }
        };
        Ok(Planted { kind: kind.parse()?, positive: share(pos, "positives")?, negative: share(neg, "negatives")? })
    }
}
