//! The demo world: seeded phantom radiographs of the invented Brackenridge Imaging Cooperative
//! (sites North Quay, Saltmarsh and Hillmoor, and Fellbrook when asked for), with exact ground
//! truth for every mark.
//!
//! [`render`] draws one [`Phantom`] from a [`PhantomSpec`]; [`write_demo_set`] writes a folder of
//! them (images, masks, `manifest.csv`) from a [`SetSpec`]. The sample models in `sample-models/`
//! are trained on sets written here. Nothing in the demo is a real scan, person or institution.
//!
//! Folder layout written by [`write_demo_set`]:
//! ```text
//! manifest.csv                      one row per image (see MANIFEST_HEADER)
//! 0007-hillmoor.png                 8-bit grayscale; images at the top so the folder opens as is
//! masks/0007-hillmoor.tag.png       255 where the tag was drawn, else 0 (also .frame, .finding,
//!                                   .letter, .ruler, .annotation)
//! ```
//!
//! The later marks of the scenario are asked for per set and are off by default, so that the
//! committed demo set and the sets the sample models were trained and measured on stay what they
//! were: [`SetSpec::fellbrook`] adds Fellbrook's images (side letter on each, a ruler on some)
//! after the founding sites' ones, and [`SetSpec::reader_marks`] lets Hillmoor's senior reader
//! ring or point at some findings. Either leaves every other image bit for bit as it was.

pub mod dicom;
mod font;
pub mod marks;
mod phantom;

pub use font::{GLYPH_H, GLYPH_W, for_each_lit, tag_height, tag_width};
pub use marks::{ANNOTATION_LEVEL, Annotation, Corner, Edge, LETTER_LEVEL, Planted, PlantedKind, RULER_LEVEL};
pub use phantom::{
    DEFAULT_CONTRAST, DEFAULT_SIZE, FILM_MAX, FILM_MIN, FRAME_LEVEL, LABELS, ManifestRow, Phantom, PhantomSpec, Site,
    TAG_CODE, TAG_LEVEL, render, tag_text,
};

use std::fmt;
use std::path::Path;
use std::str::FromStr;

use anyhow::{Context, Result, bail};
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::control::Control;

/// Share of positives per site in the pooled mix: Hillmoor is the referral site.
pub const POOLED_HILLMOOR_POSITIVE: f32 = 0.9;
pub const POOLED_OTHER_POSITIVE: f32 = 0.1;

/// Share of Fellbrook's images that carry its ruler.
pub const FELLBROOK_RULER: f32 = 0.4;
/// Shares of Hillmoor's positives the senior reader rings, and points at with an arrow (with
/// [`SetSpec::reader_marks`]).
pub const READER_RING: f32 = 0.35;
pub const READER_ARROW: f32 = 0.2;

/// How sites and labels are drawn for the images of a set.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Mix {
    /// Image i: site i mod 3, finding on every other triple: equal counts of each (site, label).
    Stratified,
    /// The cooperative's pooled data: sites equally likely, Hillmoor mostly positive
    /// ([`POOLED_HILLMOOR_POSITIVE`]), the others mostly negative ([`POOLED_OTHER_POSITIVE`]).
    Pooled,
    /// Sites equally likely, every site half positive: the marks say nothing about the label.
    Even,
}

/// Which images carry the tag and frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Marks {
    /// As the sites do it: Hillmoor's images carry both, the others none.
    BySite,
    /// No image carries them.
    None,
    /// Every image carries them.
    All,
    /// Swapped between the classes: exactly the negatives carry them.
    Swapped,
}

macro_rules! kebab_enum {
    ($t:ty, $($v:ident = $s:literal),+) => {
        impl $t {
            pub const NAMES: &'static [&'static str] = &[$($s),+];
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
                    other => bail!("unknown {} '{other}': use one of {}", stringify!($t).to_lowercase(), Self::NAMES.join(", ")),
                }
            }
        }
    };
}
kebab_enum!(Mix, Stratified = "stratified", Pooled = "pooled", Even = "even");
kebab_enum!(Marks, BySite = "by-site", None = "none", All = "all", Swapped = "swapped");

/// A whole set: how many images, from which seed, and how sites, labels and marks are drawn.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SetSpec {
    pub count: usize,
    pub seed: u64,
    pub size: usize,
    pub mix: Mix,
    pub marks: Marks,
    pub finding_contrast: f32,
    /// Write the ground-truth masks (large training sets may skip them).
    pub masks: bool,
    /// Also write DICOM copies of the first this many images, into `dicom/` (see
    /// [`dicom::write_demo_copy`]).
    #[serde(default)]
    pub dicom: usize,
    /// Write the images into one folder per site below `images/` (`images/hillmoor/…`), the
    /// way the cooperative keeps them and a sweep groups them, instead of all in the top folder.
    #[serde(default)]
    pub by_site: bool,
    /// This many images from Fellbrook, the site that joins later, written after the `count`
    /// images of the founding sites (their numbers follow on): a bare side letter on each, a
    /// ruler on some ([`FELLBROOK_RULER`]). Labels as the other sites' under the mix.
    #[serde(default)]
    pub fellbrook: usize,
    /// Hillmoor's senior reader rings some findings ([`READER_RING`]) or points at them with
    /// an arrow ([`READER_ARROW`]) before export.
    #[serde(default)]
    pub reader_marks: bool,
    /// A mark put on images by their label, on any site (see [`Planted`]): for shortcut and
    /// control models of one mark kind (sample-models/train_marks.py). None by default.
    #[serde(default)]
    pub planted: Option<Planted>,
}

impl Default for SetSpec {
    fn default() -> SetSpec {
        SetSpec {
            count: 36,
            seed: 1,
            size: DEFAULT_SIZE,
            mix: Mix::Stratified,
            marks: Marks::BySite,
            finding_contrast: DEFAULT_CONTRAST,
            masks: true,
            dicom: 0,
            by_site: false,
            fellbrook: 0,
            reader_marks: false,
            planted: None,
        }
    }
}

/// SplitMix64 finaliser: spreads (set seed, index) into an image seed with integer arithmetic only.
fn mix64(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

impl SetSpec {
    /// Images in the set: the founding sites' `count` and Fellbrook's.
    pub fn total(&self) -> usize {
        self.count + self.fellbrook
    }

    /// The spec of image `i`. Depends only on the set's seed, mix, marks, size and contrast, so
    /// the same seed with another [`Marks`] rule draws the very same images with other marks.
    /// Images from `count` on are Fellbrook's. The later marks are drawn from a stream of their
    /// own, so asking for them changes no other draw.
    pub fn phantom(&self, i: usize) -> PhantomSpec {
        let seed = mix64(self.seed ^ mix64(i as u64));
        let mut pick = ChaCha8Rng::seed_from_u64(seed);
        let mut later = ChaCha8Rng::seed_from_u64(seed);
        later.set_stream(9);
        let (site, finding) = match self.mix {
            _ if i >= self.count => {
                let p = if self.mix == Mix::Even { 0.5 } else { POOLED_OTHER_POSITIVE };
                let finding = if self.mix == Mix::Stratified { (i - self.count) % 2 == 1 } else { pick.random::<f32>() < p };
                (Site::Fellbrook, finding)
            }
            Mix::Stratified => (Site::FOUNDING[i % 3], (i / 3) % 2 == 1),
            Mix::Pooled | Mix::Even => {
                let site = Site::FOUNDING[pick.random_range(0..3usize)];
                let p = match (self.mix, site) {
                    (Mix::Even, _) => 0.5,
                    (_, Site::Hillmoor) => POOLED_HILLMOOR_POSITIVE,
                    _ => POOLED_OTHER_POSITIVE,
                };
                (site, pick.random::<f32>() < p)
            }
        };
        let marked = match self.marks {
            Marks::BySite => site.leaves_marks(),
            Marks::None => false,
            Marks::All => true,
            Marks::Swapped => !finding,
        };
        let habits = self.marks != Marks::None;
        let mut letter = habits && site.writes_side_letter();
        let mut ruler = letter && later.random::<f32>() < FELLBROOK_RULER;
        let mut annotation = if habits && self.reader_marks && site == Site::Hillmoor && finding {
            match later.random::<f32>() {
                r if r < READER_RING => Annotation::Ring,
                r if r < READER_RING + READER_ARROW => Annotation::Arrow,
                _ => Annotation::None,
            }
        } else {
            Annotation::None
        };
        // The planted mark: one draw from a stream of its own, so no other draw moves.
        let mut unfounded = false;
        if let Some(p) = self.planted {
            let mut plant = ChaCha8Rng::seed_from_u64(seed);
            plant.set_stream(10);
            if plant.random::<f32>() < if finding { p.positive } else { p.negative } {
                match p.kind {
                    PlantedKind::Letter => letter = true,
                    PlantedKind::Ruler => ruler = true,
                    PlantedKind::Ring => annotation = Annotation::Ring,
                    PlantedKind::Arrow => annotation = Annotation::Arrow,
                }
                unfounded = !finding && annotation != Annotation::None;
            }
        }
        PhantomSpec {
            seed,
            size: self.size,
            site,
            finding,
            tag: marked,
            frame: marked,
            finding_contrast: self.finding_contrast,
            letter,
            ruler,
            annotation,
            unfounded,
        }
    }

    /// File stem of image `i`, e.g. "0007-hillmoor".
    pub fn stem(&self, i: usize, site: Site) -> String {
        let width = self.total().saturating_sub(1).to_string().len().max(4);
        format!("{i:0width$}-{}", site.name())
    }
}

/// Column names of `manifest.csv`, in order.
pub const MANIFEST_HEADER: &str =
    "file,site,label,tag,frame,seed,size,finding_contrast,laterality,opacities,letter,ruler,annotation";

/// The header of manifests written before the later marks (read as carrying none of them).
pub const MANIFEST_HEADER_V1: &str = "file,site,label,tag,frame,seed,size,finding_contrast,laterality,opacities";

/// One CSV line (no newline) for a manifest row. No field can hold a comma.
pub fn manifest_line(r: &ManifestRow) -> String {
    format!(
        "{},{},{},{},{},{},{},{},{},{},{},{},{}",
        r.file,
        r.site.name(),
        r.label(),
        r.tag as u8,
        r.frame as u8,
        r.seed,
        r.size,
        r.finding_contrast,
        r.laterality,
        r.opacities,
        marks::name_or_none(r.letter),
        marks::name_or_none(r.ruler),
        r.annotation
    )
}

/// Reads a `manifest.csv` written by [`write_demo_set`].
pub fn read_manifest(path: &Path) -> Result<Vec<ManifestRow>> {
    let text = std::fs::read_to_string(path).with_context(|| format!("cannot read manifest {}", path.display()))?;
    let mut lines = text.lines();
    let columns = match lines.next() {
        Some(h) if h.trim() == MANIFEST_HEADER => 13,
        Some(h) if h.trim() == MANIFEST_HEADER_V1 => 10,
        _ => bail!(
            "{} is not a demo manifest: its first line should be '{MANIFEST_HEADER}'. Write one with `spurion demo`.",
            path.display()
        ),
    };
    let mut rows = Vec::new();
    for (k, line) in lines.enumerate().filter(|(_, l)| !l.trim().is_empty()) {
        let at = || format!("{} line {}", path.display(), k + 2);
        let f: Vec<&str> = line.split(',').map(str::trim).collect();
        if f.len() != columns {
            bail!("{}: expected {columns} fields, found {}", at(), f.len());
        }
        let flag = |s: &str, what: &str| match s {
            "1" => Ok(true),
            "0" => Ok(false),
            _ => bail!("{}: {what} should be 0 or 1, found '{s}'", at()),
        };
        let finding = match f[2] {
            l if l == LABELS[1] => true,
            l if l == LABELS[0] => false,
            l => bail!("{}: label should be '{}' or '{}', found '{l}'", at(), LABELS[0], LABELS[1]),
        };
        rows.push(ManifestRow {
            file: f[0].to_string(),
            site: f[1].parse().with_context(at)?,
            finding,
            tag: flag(f[3], "tag")?,
            frame: flag(f[4], "frame")?,
            seed: f[5].parse().with_context(|| format!("{}: seed '{}' is not a whole number", at(), f[5]))?,
            size: f[6].parse().with_context(|| format!("{}: size '{}' is not a whole number", at(), f[6]))?,
            finding_contrast: f[7].parse().with_context(|| format!("{}: finding_contrast '{}' is not a number", at(), f[7]))?,
            laterality: f[8].chars().next().filter(|_| f[8].len() == 1).with_context(|| format!("{}: laterality should be one letter", at()))?,
            opacities: f[9].parse().with_context(|| format!("{}: opacities '{}' is not a whole number", at(), f[9]))?,
            letter: if columns > 10 { marks::parse_or_none(f[10]).with_context(at)? } else { None },
            ruler: if columns > 10 { marks::parse_or_none(f[11]).with_context(at)? } else { None },
            annotation: if columns > 10 { f[12].parse().with_context(at)? } else { Annotation::None },
        });
    }
    Ok(rows)
}

/// A mask as an 8-bit gray image: 255 inside, 0 outside.
pub fn mask_image(m: &Array2<bool>) -> image::GrayImage {
    let (h, w) = m.dim();
    image::GrayImage::from_fn(w as u32, h as u32, |x, y| image::Luma([if m[[y as usize, x as usize]] { 255 } else { 0 }]))
}

/// The phantom's picture as an 8-bit gray image.
pub fn to_gray_image(a: &Array2<u8>) -> image::GrayImage {
    let (h, w) = a.dim();
    image::GrayImage::from_fn(w as u32, h as u32, |x, y| image::Luma([a[[y as usize, x as usize]]]))
}

/// PNG bytes of a gray image, exactly as [`write_demo_set`] writes them.
pub fn png_bytes(img: &image::GrayImage) -> Result<Vec<u8>> {
    let mut out = Vec::new();
    img.write_to(&mut std::io::Cursor::new(&mut out), image::ImageFormat::Png).context("cannot encode a PNG")?;
    Ok(out)
}

fn write_png(img: &image::GrayImage, path: &Path) -> Result<()> {
    std::fs::write(path, png_bytes(img)?)
        .with_context(|| format!("cannot write {}; check that the folder is writable and the disk not full", path.display()))
}

/// Writes a demo set into `out` (created if missing): images, masks and `manifest.csv`.
/// Renders in parallel; reports one unit of progress per image and stops when cancelled.
pub fn write_demo_set(out: &Path, spec: &SetSpec, ctl: &Control) -> Result<()> {
    if spec.count == 0 {
        bail!("a demo set needs at least one image (count was 0)");
    }
    if !(32..=4096).contains(&spec.size) {
        bail!("image size {} is out of range: use 32 to 4096 pixels (256 is the reference)", spec.size);
    }
    if !spec.finding_contrast.is_finite() || spec.finding_contrast < 0.0 {
        bail!("finding contrast {} should be a grey-level step of zero or more", spec.finding_contrast);
    }
    let masks = out.join("masks");
    std::fs::create_dir_all(out).with_context(|| format!("cannot create folder {}", out.display()))?;
    if spec.masks {
        std::fs::create_dir_all(&masks).with_context(|| format!("cannot create folder {}", masks.display()))?;
    }
    let dicom_dir = out.join("dicom");
    if spec.dicom > 0 {
        std::fs::create_dir_all(&dicom_dir).with_context(|| format!("cannot create folder {}", dicom_dir.display()))?;
    }
    ctl.begin(spec.total() as u64);
    let rows = (0..spec.total())
        .into_par_iter()
        .map(|i| -> Result<ManifestRow> {
            ctl.check()?;
            let p = render(&spec.phantom(i));
            let stem = spec.stem(i, p.row.site);
            let file = if spec.by_site { format!("images/{}/{stem}.png", p.row.site.name()) } else { format!("{stem}.png") };
            let image_path = out.join(&file);
            if let Some(dir) = image_path.parent() {
                std::fs::create_dir_all(dir).with_context(|| format!("cannot create folder {}", dir.display()))?;
            }
            write_png(&to_gray_image(&p.image), &image_path)?;
            if spec.masks {
                for (what, m) in p.masks() {
                    write_png(&mask_image(m), &masks.join(format!("{stem}.{what}.png")))?;
                }
            }
            if i < spec.dicom {
                dicom::write_demo_copy(&dicom_dir.join(format!("{stem}.dcm")), &p, i as u32)?;
            }
            ctl.advance(1);
            Ok(ManifestRow { file, ..p.row })
        })
        .collect::<Result<Vec<_>>>()?;
    let mut csv = String::from(MANIFEST_HEADER);
    csv.push('\n');
    for r in &rows {
        csv.push_str(&manifest_line(r));
        csv.push('\n');
    }
    let path = out.join("manifest.csv");
    std::fs::write(&path, csv).with_context(|| format!("cannot write {}", path.display()))?;
    Ok(())
}
