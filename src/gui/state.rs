//! The inspector's state as plain data: what is open, what has been read, what is selected and
//! how it is shown. Panels read it; only [`super::app::Inspector`] changes it.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use ndarray::Array2;

use crate::feed::{FeedCard, Picture};
use crate::methods::Reading;
use crate::methods::agree::{Agreement, Spread};
use crate::sign::Sign;

use crate::model::Model;
use crate::regions::drawn::DrawnShape;
use crate::regions::{Assessment, DrawnFile, Region};

use crate::methods::{BaselineKind, Request};

use super::form::Form;

/// A loaded model with the card it is fed by.
pub struct Session {
    pub model: Arc<Model>,
    pub card: Arc<FeedCard>,
    /// One label per output position (from the card, else "class N").
    pub labels: Vec<String>,
    /// Where the card came from, for the header ("beside the model" or "inferred").
    pub card_note: String,
    /// The feed, each value with its origin (the feed window shows it).
    pub feed: crate::feed::FeedSummary,
}

/// An image after the worker opened it: pixels, the model's scores, the regions found in it.
pub struct Prepared {
    pub picture: Arc<Picture>,
    /// Output 0 for this image, one value per class.
    pub scores: Vec<f32>,
    pub regions: Vec<Region>,
    /// Each region's outline as pixel-edge segments (for drawing at any zoom).
    pub region_edges: Vec<Vec<[[f32; 2]; 2]>>,
    /// The picture ready to upload as a texture.
    pub base_image: egui::ColorImage,
    /// The picture with every found region painted out (what the removal figures ran the model
    /// on), and the fills used; `None` when no region was found.
    pub painted: Option<(egui::ColorImage, String)>,
    /// How this picture was fed (what a JSON export writes as `feed`).
    pub feed: crate::report::FeedRecord,
}

/// One entry of the image list.
pub struct ImageEntry {
    pub path: PathBuf,
    pub state: ImageState,
}

pub enum ImageState {
    NotOpened,
    Opening,
    Ready(Arc<Prepared>),
    Failed(String),
}

/// A finished reading ready to draw.
pub struct Shown {
    pub reading: Arc<Reading>,
    /// The map on the image grid (channels summed).
    pub map: Array2<f32>,
    /// The signed map's values sorted, for the hover percentile.
    pub spread: Spread,
    /// Region figures and the flag (the regions module's rule, on the supporting part), over
    /// the found regions and then the drawn ones.
    pub assessment: Assessment,
    /// The drawn regions' outlines as pixel-edge segments (as they were rasterised).
    pub drawn_edges: Vec<Vec<[[f32; 2]; 2]>>,
    /// With drawn regions: the picture with every region, found and drawn, painted out (what
    /// the removal of all regions ran the model on), and the fills used.
    pub painted: Option<(egui::ColorImage, String)>,
}

/// The regions a person drew on an image, as the ledger holds them, with their canonical text
/// (what keys compare by, the same text the sweep's cache keys take).
#[derive(Clone, Debug, Default)]
pub struct Drawn {
    pub file: Option<Arc<DrawnFile>>,
    text: String,
}

impl Drawn {
    pub fn new(file: Option<DrawnFile>) -> Drawn {
        let file = file.filter(|f| !f.regions.is_empty());
        let text = crate::sweep::read::drawn_extra(file.as_ref());
        Drawn { file: file.map(Arc::new), text }
    }

    pub fn shapes(&self) -> &[DrawnShape] {
        self.file.as_ref().map_or(&[], |f| f.regions.as_slice())
    }

    pub fn is_empty(&self) -> bool {
        self.file.is_none()
    }

    pub fn text(&self) -> &str {
        &self.text
    }
}

/// A reading's identity: which image, which request, which drawn regions. Equal keys give the
/// same reading and figures.
#[derive(Clone, Debug)]
pub struct Key {
    pub image: PathBuf,
    pub request: Request,
    pub drawn: Drawn,
    /// The request's canonical text, which is what keys compare and hash by.
    text: String,
}

impl Key {
    pub fn new(image: &Path, request: Request, drawn: Drawn) -> Key {
        let text = request.key_text();
        Key { image: image.to_path_buf(), request, drawn, text }
    }

    /// Whether `other` is the same reading, whatever regions were drawn (the map is the same;
    /// only the figures differ).
    pub fn same_reading(&self, other: &Key) -> bool {
        self.image == other.image && self.text == other.text
    }
}

impl PartialEq for Key {
    fn eq(&self, other: &Key) -> bool {
        self.same_reading(other) && self.drawn.text == other.drawn.text
    }
}

impl Eq for Key {}

impl std::hash::Hash for Key {
    fn hash<H: std::hash::Hasher>(&self, h: &mut H) {
        self.image.hash(h);
        self.text.hash(h);
        self.drawn.text.hash(h);
    }
}

pub type JobId = u64;

pub enum Slot {
    Pending(JobId),
    Done(Arc<Shown>),
    Failed(String),
}

/// Readings by key; switching back to a key already read shows it at once.
#[derive(Default)]
pub struct ReadingCache {
    pub slots: HashMap<Key, Slot>,
}

impl ReadingCache {
    pub fn done(&self, key: &Key) -> Option<&Arc<Shown>> {
        match self.slots.get(key) {
            Some(Slot::Done(s)) => Some(s),
            _ => None,
        }
    }

    /// A finished reading of the same image and request as `key` under other drawn regions
    /// (its map serves; only the figures need computing again).
    pub fn same_reading_done(&self, key: &Key) -> Option<&Arc<Shown>> {
        self.slots.iter().find_map(|(k, s)| match s {
            Slot::Done(s) if k.same_reading(key) => Some(s),
            _ => None,
        })
    }

    /// Whether a reading of the same image and request as `key` is being computed (under any
    /// drawn regions).
    pub fn same_reading_pending(&self, key: &Key) -> bool {
        self.slots.iter().any(|(k, s)| matches!(s, Slot::Pending(_)) && k.same_reading(key))
    }
}

/// How the reading is drawn over the image.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Overlay {
    Tint,
    Contour,
    Reveal,
    /// The image alone (to look at what the map covers).
    Off,
}

impl Overlay {
    pub const ALL: [Overlay; 4] = [Overlay::Tint, Overlay::Contour, Overlay::Reveal, Overlay::Off];
    pub fn name(self) -> &'static str {
        match self {
            Overlay::Tint => "tint",
            Overlay::Contour => "contour",
            Overlay::Reveal => "reveal",
            Overlay::Off => "image only",
        }
    }
}

/// The top share the contour and reveal overlays and the overlap figure use.
pub const TOP_SHARES: [f64; 3] = [0.05, 0.10, 0.20];

/// Slide view settings.
#[derive(Clone, Debug, PartialEq)]
pub struct ViewSettings {
    pub overlay: Overlay,
    pub opacity: f32,
    pub sign: Sign,
    pub top_share: f64,
    pub show_regions: bool,
    /// Show the picture with its found regions painted out instead of as it is.
    pub painted_out: bool,
    /// A window for showing DICOM pictures (`None`: as the model is fed). It changes what is
    /// shown, never what the model reads.
    pub display_window: Option<crate::feed::window::Windowing>,
    /// Image pixels per screen point; `None` fits the image to the panel.
    pub zoom: Option<f32>,
    /// Image-pixel position shown at the panel centre (when zoomed).
    pub centre: [f32; 2],
}

impl Default for ViewSettings {
    fn default() -> Self {
        ViewSettings {
            overlay: Overlay::Tint,
            opacity: crate::methods::defaults::OPACITY,
            sign: crate::methods::defaults::SIGN,
            top_share: 0.10,
            show_regions: true,
            painted_out: false,
            display_window: None,
            zoom: None,
            centre: [0.0, 0.0],
        }
    }
}

/// The baseline strip: which readings it shows and the agreement over them.
#[derive(Default)]
pub struct StripState {
    /// Each map on its own colour scale (else one scale for all maps).
    pub per_map_scale: bool,
    /// Set when the user asked for the strip of the current image and settings.
    pub wanted: Option<StripPlan>,
    /// Agreement by the keys of the maps it compares.
    pub agreement: HashMap<AgreementKey, AgreementSlot>,
}

/// The baselines one strip shows, with the reason for each left out.
#[derive(Clone, Debug, PartialEq)]
pub struct StripPlan {
    pub image: PathBuf,
    pub tiles: Vec<(BaselineKind, Result<Key, String>)>,
}

impl StripPlan {
    pub fn new(image: &Path, form: &Form, image_dir: Option<&Path>, drawn: &Drawn) -> StripPlan {
        let tiles = form
            .strip_baselines(image_dir)
            .into_iter()
            .map(|(kind, b)| (kind, b.map(|b| Key::new(image, form.request_with(b), drawn.clone()))))
            .collect();
        StripPlan { image: image.to_path_buf(), tiles }
    }

    pub fn keys(&self) -> Vec<Key> {
        self.tiles.iter().filter_map(|(_, k)| k.as_ref().ok().cloned()).collect()
    }
}

#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub struct AgreementKey {
    pub keys: Vec<Key>,
    /// The sign's name (the render module's `Sign` does not hash).
    pub sign: &'static str,
    /// Top share in per mille, so the key hashes.
    pub share_permille: u32,
}

pub enum AgreementSlot {
    Pending,
    Done(Arc<Agreement>),
}

/// One message in the status line, kept with its kind so it can be coloured.
#[derive(Clone, Debug)]
pub struct Note {
    pub text: String,
    pub kind: NoteKind,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum NoteKind {
    Info,
    Warning,
    Error,
}

/// Where exports go when no save dialog is available (editable in the export panel): a folder in
/// the current folder, shown relative so the panel names no machine's paths.
pub fn default_export_dir() -> PathBuf {
    PathBuf::from("spurion-export")
}

/// Drawing regions on the slide.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum DrawMode {
    /// Dragging pans the slide.
    #[default]
    Off,
    /// Dragging draws a box from corner to corner.
    Box,
    /// Dragging draws a freehand outline, closed when the button is let go.
    Outline,
}

/// The drawing tool: its mode, the label new regions get, the shape being drawn.
#[derive(Clone, Debug)]
pub struct DrawState {
    pub mode: DrawMode,
    pub label: String,
    /// The shape being drawn, in image pixels (a box's two corners, or the outline's points).
    pub points: Vec<[f32; 2]>,
}

impl Default for DrawState {
    fn default() -> Self {
        DrawState { mode: DrawMode::Off, label: "mark".into(), points: Vec::new() }
    }
}

/// Where the slide put the picture: image pixel (x, y) is at `origin + (x, y)·zoom` on screen.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SlidePlace {
    pub origin: egui::Pos2,
    pub zoom: f32,
}

impl SlidePlace {
    pub fn to_screen(&self, p: [f32; 2]) -> egui::Pos2 {
        egui::pos2(self.origin.x + p[0] * self.zoom, self.origin.y + p[1] * self.zoom)
    }

    pub fn to_image(&self, s: egui::Pos2) -> [f32; 2] {
        [(s.x - self.origin.x) / self.zoom, (s.y - self.origin.y) / self.zoom]
    }
}
