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
use crate::regions::{Assessment, Region};

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
    /// Region figures and the flag (the regions module's rule, on the supporting part).
    pub assessment: Assessment,
}

/// A reading's identity: which image, which request. Equal keys give the same reading.
#[derive(Clone, Debug)]
pub struct Key {
    pub image: PathBuf,
    pub request: Request,
    /// The request's canonical text, which is what keys compare and hash by.
    text: String,
}

impl Key {
    pub fn new(image: &Path, request: Request) -> Key {
        let text = request.key_text();
        Key { image: image.to_path_buf(), request, text }
    }
}

impl PartialEq for Key {
    fn eq(&self, other: &Key) -> bool {
        self.image == other.image && self.text == other.text
    }
}

impl Eq for Key {}

impl std::hash::Hash for Key {
    fn hash<H: std::hash::Hasher>(&self, h: &mut H) {
        self.image.hash(h);
        self.text.hash(h);
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
    pub fn new(image: &Path, form: &Form, image_dir: Option<&Path>) -> StripPlan {
        let tiles = form
            .strip_baselines(image_dir)
            .into_iter()
            .map(|(kind, b)| (kind, b.map(|b| Key::new(image, form.request_with(b)))))
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
