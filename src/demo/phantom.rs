//! One phantom: a radiograph-like picture of the invented scenario and its ground truth.
//!
//! Every pixel is decided with +, −, ×, ÷, comparisons, `floor` and `round` on f32 (all exact
//! IEEE operations, no sin/exp/powf whose last bit may differ between platforms), and every
//! random draw comes from ChaCha8 (portable by design), so the same spec gives the same bytes on
//! every machine. The masks are written by the same calls that draw the marks and opacities.
//!
//! Separate random streams feed anatomy, opacities, film noise, the tag and each of the later
//! marks (side letter, ruler, the reader's ring or arrow: `marks.rs`), so switching a mark or the
//! finding on or off leaves everything else in the image untouched: the swap experiments of the
//! sample models compare an image only with itself, and an image that gains a new mark keeps
//! every other pixel it had.

use std::fmt;
use std::str::FromStr;

use anyhow::{Result, bail};
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use super::font;
use super::marks::{self, Annotation, Corner, Edge};

/// The labels of the demo task, in output order (index 0 = no finding).
pub const LABELS: [&str; 2] = ["no finding", "finding present"];

/// Image side in pixels unless a spec says otherwise.
pub const DEFAULT_SIZE: usize = 256;

/// Peak brightening of an opacity over the lung, in 8-bit grey levels, unless a spec says
/// otherwise. Kept modest next to the film noise so that a finding takes some looking for.
pub const DEFAULT_CONTRAST: f32 = 22.0;

/// What Hillmoor's digitiser burns into the corner: its site code, then the laterality letter.
pub const TAG_CODE: &str = "HM";

/// Grey level of the burned-in tag and of the frame. Ordinary pixels are kept within
/// [`FILM_MIN`]..=[`FILM_MAX`], so a mark pixel never equals the pixel it covers.
pub const TAG_LEVEL: u8 = 255;
pub const FRAME_LEVEL: u8 = 0;
pub const FILM_MIN: f32 = 8.0;
pub const FILM_MAX: f32 = 240.0;

/// The sites of the Brackenridge Imaging Cooperative (invented): three founding sites and
/// Fellbrook, which joins later.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Site {
    NorthQuay,
    Saltmarsh,
    Hillmoor,
    Fellbrook,
}

impl Site {
    /// The three founding sites, in the order the set rules draw them from.
    pub const FOUNDING: [Site; 3] = [Site::NorthQuay, Site::Saltmarsh, Site::Hillmoor];
    pub const ALL: [Site; 4] = [Site::NorthQuay, Site::Saltmarsh, Site::Hillmoor, Site::Fellbrook];

    /// Name used in files and manifests: "north-quay", "saltmarsh", "hillmoor".
    pub fn name(self) -> &'static str {
        match self {
            Site::NorthQuay => "north-quay",
            Site::Saltmarsh => "saltmarsh",
            Site::Hillmoor => "hillmoor",
            Site::Fellbrook => "fellbrook",
        }
    }

    /// Name for people: "North Quay", "Saltmarsh", "Hillmoor".
    pub fn title(self) -> &'static str {
        match self {
            Site::NorthQuay => "North Quay",
            Site::Saltmarsh => "Saltmarsh",
            Site::Hillmoor => "Hillmoor",
            Site::Fellbrook => "Fellbrook",
        }
    }

    /// Whether the site's digitiser leaves the corner tag and the dark frame.
    pub fn leaves_marks(self) -> bool {
        self == Site::Hillmoor
    }

    /// Whether the site writes a bare side letter into a corner (Fellbrook).
    pub fn writes_side_letter(self) -> bool {
        self == Site::Fellbrook
    }
}

impl fmt::Display for Site {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Site {
    type Err = anyhow::Error;
    fn from_str(s: &str) -> Result<Site> {
        match s.trim().to_ascii_lowercase().replace(['_', ' '], "-").as_str() {
            "north-quay" | "northquay" => Ok(Site::NorthQuay),
            "saltmarsh" => Ok(Site::Saltmarsh),
            "hillmoor" => Ok(Site::Hillmoor),
            "fellbrook" => Ok(Site::Fellbrook),
            other => bail!("unknown site '{other}': use north-quay, saltmarsh, hillmoor or fellbrook"),
        }
    }
}

/// Everything that decides one phantom.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PhantomSpec {
    pub seed: u64,
    /// Side of the square image in pixels; geometry scales with it (256 is the reference).
    pub size: usize,
    pub site: Site,
    /// One or more soft round opacities in the lungs.
    pub finding: bool,
    /// Hillmoor's white corner tag.
    pub tag: bool,
    /// Hillmoor's thin dark frame.
    pub frame: bool,
    /// Nominal peak brightening of an opacity (grey levels); each opacity varies around it.
    pub finding_contrast: f32,
    /// Fellbrook's bare side letter (the laterality letter, no plate) in a corner that changes
    /// from image to image.
    #[serde(default)]
    pub letter: bool,
    /// Fellbrook's small ruler with tick marks along one edge.
    #[serde(default)]
    pub ruler: bool,
    /// The Hillmoor reader's ring or arrow on the (first) finding; drawn only with a finding.
    #[serde(default)]
    pub annotation: Annotation,
    /// Draw the reader's mark even without a finding, around a place in a lung picked from a
    /// stream of its own (a suspicion the reader marked and that was not borne out). Only the
    /// planted marks of [`super::Planted`] ask for it; without it a negative gets no ring or arrow.
    #[serde(default)]
    pub unfounded: bool,
}

impl PhantomSpec {
    /// A spec with the site's usual marks, the default size and contrast.
    pub fn new(seed: u64, site: Site, finding: bool) -> PhantomSpec {
        PhantomSpec {
            seed,
            size: DEFAULT_SIZE,
            site,
            finding,
            tag: site.leaves_marks(),
            frame: site.leaves_marks(),
            finding_contrast: DEFAULT_CONTRAST,
            letter: site.writes_side_letter(),
            ruler: false,
            annotation: Annotation::None,
            unfounded: false,
        }
    }
}

/// One manifest line: what an image is and everything needed to draw it again.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ManifestRow {
    /// Image file, relative to the manifest (empty until written).
    pub file: String,
    pub site: Site,
    pub finding: bool,
    pub tag: bool,
    pub frame: bool,
    pub seed: u64,
    pub size: usize,
    pub finding_contrast: f32,
    /// The letter in the tag ('L' or 'R'); drawn for every image, shown only with a tag.
    pub laterality: char,
    /// Number of opacities drawn (0 without a finding).
    pub opacities: usize,
    /// Where the bare side letter was written, if it was.
    pub letter: Option<Corner>,
    /// Along which edge the ruler lies, if there is one.
    pub ruler: Option<Edge>,
    /// What the reader drew on the finding (none without a finding).
    pub annotation: Annotation,
}

impl ManifestRow {
    pub fn label(&self) -> &'static str {
        LABELS[self.finding as usize]
    }

    /// The spec that draws this row's image again.
    pub fn spec(&self) -> PhantomSpec {
        PhantomSpec {
            seed: self.seed,
            size: self.size,
            site: self.site,
            finding: self.finding,
            tag: self.tag,
            frame: self.frame,
            finding_contrast: self.finding_contrast,
            letter: self.letter.is_some(),
            ruler: self.ruler.is_some(),
            annotation: self.annotation,
            unfounded: self.annotation != Annotation::None && self.opacities == 0,
        }
    }
}

/// A drawn phantom: the 8-bit picture, its ground-truth masks (same grid) and its manifest row.
#[derive(Clone, Debug)]
pub struct Phantom {
    pub image: Array2<u8>,
    pub tag_mask: Array2<bool>,
    pub frame_mask: Array2<bool>,
    pub finding_mask: Array2<bool>,
    /// Fellbrook's side letter, its ruler, and the reader's ring or arrow.
    pub letter_mask: Array2<bool>,
    pub ruler_mask: Array2<bool>,
    pub annotation_mask: Array2<bool>,
    pub row: ManifestRow,
}

#[derive(Clone, Copy)]
struct Ellipse {
    cx: f32,
    cy: f32,
    ax: f32,
    ay: f32,
}

impl Ellipse {
    /// 0 at the centre, 1 on the outline.
    fn q(&self, u: f32, v: f32) -> f32 {
        let dx = (u - self.cx) / self.ax;
        let dy = (v - self.cy) / self.ay;
        dx * dx + dy * dy
    }
}

struct Opacity {
    cx: f32,
    cy: f32,
    r: f32,
    peak: f32,
}

fn stream(seed: u64, k: u64) -> ChaCha8Rng {
    let mut r = ChaCha8Rng::seed_from_u64(seed);
    r.set_stream(k);
    r
}

fn ramp(t: f32) -> f32 {
    t.clamp(0.0, 1.0)
}

/// Draws the phantom of `spec`. Sizes below 32 are raised to 32.
pub fn render(spec: &PhantomSpec) -> Phantom {
    let n = spec.size.max(32);
    // Geometry is written for a 256-pixel image; `s` maps it to this size.
    let s = n as f32 / 256.0;

    let mut anat = stream(spec.seed, 1);
    let mut jit = |a: f32| anat.random_range(-a..a);
    let body = Ellipse { cx: 128.0 + jit(4.0), cy: 138.0 + jit(4.0), ax: 104.0 + jit(6.0), ay: 114.0 + jit(5.0) };
    let sep = 40.0 + jit(3.0);
    let lung_cy = body.cy - 16.0 + jit(3.0);
    let mut lungs = [body; 2];
    for (k, side) in [-1.0f32, 1.0].into_iter().enumerate() {
        lungs[k] = Ellipse { cx: body.cx + side * sep + jit(2.0), cy: lung_cy + jit(2.0), ax: 27.0 + jit(3.0), ay: 60.0 + jit(5.0) };
    }
    let heart = Ellipse { cx: body.cx + 12.0 + jit(3.0), cy: lung_cy + 38.0 + jit(3.0), ax: 30.0 + jit(3.0), ay: 24.0 + jit(3.0) };
    let rib_slope = 0.40 + jit(0.05);
    let rib_bend = 0.0024 + jit(0.0003);
    const RIBS: usize = 9;
    let mut rib_y = [[0.0f32; RIBS]; 2];
    for (k, lung) in lungs.iter().enumerate() {
        let top = lung.cy - lung.ay - 4.0;
        let step = (2.0 * lung.ay + 8.0) / RIBS as f32;
        for (i, y) in rib_y[k].iter_mut().enumerate() {
            *y = top + i as f32 * step - 14.0 + jit(1.5);
        }
    }
    let gain = 1.0 + jit(0.08);
    let offset = jit(8.0);
    const MOTTLE: usize = 9;
    let mut mottle = [[0.0f32; MOTTLE]; MOTTLE];
    for row in mottle.iter_mut() {
        for m in row.iter_mut() {
            *m = jit(1.0);
        }
    }

    let opacities = if spec.finding { place_opacities(spec, &lungs) } else { Vec::new() };

    let mut grain = stream(spec.seed, 3);
    let mut image = Array2::<u8>::zeros((n, n));
    let mut finding_mask = Array2::<bool>::from_elem((n, n), false);
    for y in 0..n {
        let v = (y as f32 + 0.5) / s;
        for x in 0..n {
            let u = (x as f32 + 0.5) / s;
            let b = ramp((1.0 - body.q(u, v)) * 9.0);
            let mut value = 26.0 * (1.0 - b);
            if b > 0.0 {
                let lung = lungs.iter().map(|l| ramp((1.0 - l.q(u, v)) * 4.0)).fold(0.0f32, f32::max);
                let h = ramp((1.0 - heart.q(u, v)) * 5.0);
                let dx = (u - body.cx).abs();
                let half_w = 12.0 + 14.0 * ramp((v - lung_cy + 10.0) / 50.0);
                let med = ramp((half_w - dx) / 3.0) * ramp((v - (lung_cy - 62.0)) / 10.0) * ramp((lung_cy + 70.0 - v) / 10.0);
                let spine = ramp((7.0 - dx) / 2.0);
                let lung = lung * (1.0 - h) * (1.0 - med);
                let mut rib = 0.0f32;
                if dx > 6.0 {
                    let side = (u >= body.cx) as usize;
                    for &y0 in &rib_y[side] {
                        let yc = y0 + rib_slope * dx - rib_bend * dx * dx;
                        rib = rib.max(ramp(1.0 - (v - yc).abs() / 2.8));
                    }
                }
                let mut tissue = 132.0 + 38.0 * med + 22.0 * h + 14.0 * spine - 80.0 * lung + 24.0 * rib * (0.3 + 0.7 * lung);
                for o in &opacities {
                    let (ex, ey) = (u - o.cx, v - o.cy);
                    let t = (ex * ex + ey * ey) / (o.r * o.r);
                    if t < 1.0 {
                        tissue += o.peak * (1.0 - t) * (1.0 - t);
                        finding_mask[[y, x]] = true;
                    }
                }
                value += b * (offset + gain * tissue);
            }
            // Film mottle: a coarse grid, bilinear; grain: four uniform bytes summed (near-normal).
            let gx = (u / 32.0).clamp(0.0, (MOTTLE - 1) as f32 - 1e-3);
            let gy = (v / 32.0).clamp(0.0, (MOTTLE - 1) as f32 - 1e-3);
            let (ix, iy) = (gx.floor() as usize, gy.floor() as usize);
            let (fx, fy) = (gx - ix as f32, gy - iy as f32);
            let top = mottle[iy][ix] * (1.0 - fx) + mottle[iy][ix + 1] * fx;
            let bot = mottle[iy + 1][ix] * (1.0 - fx) + mottle[iy + 1][ix + 1] * fx;
            let m = top * (1.0 - fy) + bot * fy;
            let bytes = grain.random::<u32>().to_le_bytes();
            let sum: u32 = bytes.iter().map(|&b| b as u32).sum();
            let g = (sum as f32 - 510.0) / 147.8;
            let px = (value + 6.0 * m + 5.0 * g).clamp(FILM_MIN, FILM_MAX);
            image[[y, x]] = px.round() as u8;
        }
    }

    // The marks of the later scenario, each from its own stream; frame and tag go over them.
    let mut annotation_mask = Array2::<bool>::from_elem((n, n), false);
    let marked_place = match opacities.first() {
        Some(o) => Some((o.cx, o.cy, o.r)),
        None if spec.unfounded => Some(unfounded_place(spec.seed, &lungs)),
        None => None,
    };
    let annotation = match marked_place {
        Some(place) if spec.annotation != Annotation::None => {
            marks::annotation(&mut image, &mut annotation_mask, spec.annotation, place, &mut stream(spec.seed, 7));
            spec.annotation
        }
        _ => Annotation::None,
    };
    let mut tag_rng = stream(spec.seed, 4);
    let laterality = if tag_rng.random::<bool>() { 'L' } else { 'R' };
    let mut letter_mask = Array2::<bool>::from_elem((n, n), false);
    let letter = spec.letter.then(|| {
        let avoid = spec.tag.then_some(Corner::TopLeft);
        marks::side_letter(&mut image, &mut letter_mask, laterality, avoid, &mut stream(spec.seed, 5))
    });
    let mut ruler_mask = Array2::<bool>::from_elem((n, n), false);
    let ruler = spec.ruler.then(|| marks::ruler(&mut image, &mut ruler_mask, &mut stream(spec.seed, 6)));

    let mut frame_mask = Array2::<bool>::from_elem((n, n), false);
    if spec.frame {
        let w = ((4.0 * s).round() as usize).max(1);
        for ((y, x), m) in frame_mask.indexed_iter_mut() {
            *m = x < w || y < w || x >= n - w || y >= n - w;
        }
        for (p, &m) in image.iter_mut().zip(frame_mask.iter()) {
            if m {
                *p = FRAME_LEVEL;
            }
        }
    }

    let mut tag_mask = Array2::<bool>::from_elem((n, n), false);
    if spec.tag {
        let text = tag_text(laterality);
        let scale = ((2.0 * s).round() as usize).max(1);
        // Inside where the frame would be, so tag and frame never overlap.
        let at = ((4.0 * s).round() as usize).max(1) + ((6.0 * s).round() as usize).max(1);
        font::for_each_lit(&text, at, at, scale, |x, y| {
            if x < n && y < n {
                tag_mask[[y, x]] = true;
                image[[y, x]] = TAG_LEVEL;
            }
        });
    }

    for m in [&mut annotation_mask, &mut letter_mask, &mut ruler_mask] {
        ndarray::Zip::from(m).and(&frame_mask).and(&tag_mask).for_each(|m, &f, &t| *m &= !(f || t));
    }

    let row = ManifestRow {
        file: String::new(),
        site: spec.site,
        finding: spec.finding,
        tag: spec.tag,
        frame: spec.frame,
        seed: spec.seed,
        size: n,
        finding_contrast: spec.finding_contrast,
        laterality,
        opacities: opacities.len(),
        letter,
        ruler,
        annotation,
    };
    Phantom { image, tag_mask, frame_mask, finding_mask, letter_mask, ruler_mask, annotation_mask, row }
}

impl Phantom {
    /// Every ground-truth mask with the name its file takes (`masks/STEM.NAME.png`).
    pub fn masks(&self) -> [(&'static str, &Array2<bool>); 6] {
        [
            ("tag", &self.tag_mask),
            ("frame", &self.frame_mask),
            ("finding", &self.finding_mask),
            ("letter", &self.letter_mask),
            ("ruler", &self.ruler_mask),
            ("annotation", &self.annotation_mask),
        ]
    }
}

/// The tag's text for a laterality letter, e.g. "HM L".
pub fn tag_text(laterality: char) -> String {
    format!("{TAG_CODE} {laterality}")
}

/// Where a reader marks a suspicion that has no finding under it: a place well inside a lung
/// and a radius like an opacity's, from a stream of its own (8).
fn unfounded_place(seed: u64, lungs: &[Ellipse; 2]) -> (f32, f32, f32) {
    let mut r = stream(seed, 8);
    let lung = lungs[r.random_range(0..2usize)];
    let mut at = (lung.cx, lung.cy);
    for _ in 0..64 {
        let (u, v) = (r.random_range(-1.0f32..1.0), r.random_range(-1.0f32..1.0));
        if u * u + v * v < 0.45 {
            at = (lung.cx + u * lung.ax, lung.cy + v * lung.ay);
            break;
        }
    }
    (at.0, at.1, r.random_range(6.0f32..11.0))
}

/// One to three opacities, centred well inside a lung (rejection sampling, bounded tries).
fn place_opacities(spec: &PhantomSpec, lungs: &[Ellipse; 2]) -> Vec<Opacity> {
    let mut r = stream(spec.seed, 2);
    let roll = r.random::<f32>();
    let count = 1 + (roll < 0.35) as usize + (roll < 0.10) as usize;
    let mut out = Vec::with_capacity(count);
    for _ in 0..count {
        let lung = lungs[r.random_range(0..2usize)];
        let mut at = (lung.cx, lung.cy);
        for _ in 0..64 {
            let (u, v) = (r.random_range(-1.0f32..1.0), r.random_range(-1.0f32..1.0));
            if u * u + v * v < 0.45 {
                at = (lung.cx + u * lung.ax, lung.cy + v * lung.ay);
                break;
            }
        }
        let radius = r.random_range(6.0f32..11.0);
        let peak = spec.finding_contrast * r.random_range(0.75f32..1.25);
        out.push(Opacity { cx: at.0, cy: at.1, r: radius, peak });
    }
    out
}
