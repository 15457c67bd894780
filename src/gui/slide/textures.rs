//! Texture caches: the picture, the slide's layer, contours, strip tiles and legends, keyed by
//! what they show so that a frame uploads nothing it uploaded before.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use egui::TextureHandle;

use crate::methods::agree;
use crate::sign::Sign;

use crate::gui::app::Inspector;
use crate::gui::slide::paint;
use crate::gui::state::{Key, Overlay, Prepared, Shown};
use crate::gui::work::Done;

/// Texture caches, keyed by what they show.
#[derive(Default)]
pub(crate) struct Textures {
    pub base: HashMap<PathBuf, TextureHandle>,
    /// The pictures with their regions painted out, by path and drawn regions' text (empty:
    /// the found regions only).
    pub painted: HashMap<(PathBuf, String), TextureHandle>,
    /// DICOM pictures through display windows, by path and window (`None` while being drawn).
    pub display: HashMap<(PathBuf, String), Option<TextureHandle>>,
    pub layer: Option<(LayerKey, TextureHandle)>,
    pub contour: Option<(LayerKey, Vec<[[f32; 2]; 2]>)>,
    pub tiles: HashMap<(Key, &'static str, u32), TextureHandle>,
    pub legend: HashMap<&'static str, TextureHandle>,
    /// Colour-scale end per (reading, sign).
    pub scale: HashMap<Key, f32>,
}

#[derive(Clone, Debug, PartialEq)]
pub(crate) struct LayerKey {
    pub key: Key,
    pub sign: Sign,
    pub overlay: Overlay,
    pub share_permille: u32,
}

impl Inspector {
    /// How many pictures have been drawn through a display window (tests wait on this).
    pub fn display_windows_drawn(&self) -> usize {
        self.tex.display.values().filter(|t| t.is_some()).count()
    }

    /// The slide's picture: as it is, or with its regions painted out when the view asks for
    /// that and there are any (found ones from the image, and drawn ones from the reading's
    /// figures once they are in).
    pub(crate) fn slide_texture(&mut self, path: &Path, prepared: &Prepared, shown: Option<&Shown>) -> TextureHandle {
        let drawn = self.ledger.drawn_of(path);
        let with_drawn = shown.and_then(|s| s.painted.as_ref()).filter(|_| !drawn.is_empty());
        match (with_drawn.or(prepared.painted.as_ref()), self.view.painted_out) {
            (Some((img, _)), true) => {
                let key = (path.to_path_buf(), if with_drawn.is_some() { drawn.text().to_string() } else { String::new() });
                if let Some(t) = self.tex.painted.get(&key) {
                    return t.clone();
                }
                let t = self.ctx.load_texture(format!("painted {}", path.display()), img.clone(), egui::TextureOptions::NEAREST);
                self.tex.painted.insert(key, t.clone());
                t
            }
            _ => match (&self.view.display_window, &prepared.picture.dicom) {
                (Some(w), Some(_)) => self.display_texture(path, prepared, w.clone()),
                _ => self.base_texture(path, prepared),
            },
        }
    }

    /// The picture through a display window: drawn on a worker the first time (the picture as
    /// fed is shown until it is in).
    fn display_texture(&mut self, path: &Path, prepared: &Prepared, w: crate::feed::window::Windowing) -> TextureHandle {
        let key = (path.to_path_buf(), format!("{w:?}"));
        match self.tex.display.get(&key) {
            Some(Some(t)) => return t.clone(),
            Some(None) => {}
            None => {
                self.tex.display.insert(key.clone(), None);
                let (picture, (p, k)) = (prepared.picture.clone(), key.clone());
                let (q, k2) = (p.clone(), k.clone());
                self.workers.spawn(
                    "display window",
                    false,
                    move |_, _| Done::Display { result: crate::gui::slide::engine::display_image(&picture, &w).map_err(|e| format!("{e:#}")), path: p, key: k },
                    move |msg| Done::Display { path: q, key: k2, result: Err(msg) },
                );
            }
        }
        self.base_texture(path, prepared)
    }

    pub(crate) fn base_texture(&mut self, path: &Path, prepared: &Prepared) -> TextureHandle {
        if let Some(t) = self.tex.base.get(path) {
            return t.clone();
        }
        let t = self.ctx.load_texture(
            format!("picture {}", path.display()),
            prepared.base_image.clone(),
            egui::TextureOptions::NEAREST,
        );
        self.tex.base.insert(path.to_path_buf(), t.clone());
        t
    }

    /// Colour-scale end of a reading (the render module's robust scale of the signed map).
    pub(crate) fn scale_of(&mut self, key: &Key, shown: &Shown) -> f32 {
        *self.tex.scale.entry(key.clone()).or_insert_with(|| crate::render::robust_scale(&shown.map))
    }

    pub(crate) fn layer_texture(&mut self, lk: &LayerKey, shown: &Shown, scale: f32) -> Option<TextureHandle> {
        if let Some((k, t)) = &self.tex.layer
            && k == lk
        {
            return Some(t.clone());
        }
        let img = match lk.overlay {
            Overlay::Tint => paint::tint_layer(&shown.map, scale, lk.sign),
            Overlay::Reveal => paint::reveal_layer(&agree::top_mask(&agree::view(&shown.map, lk.sign), self.view.top_share)),
            Overlay::Contour | Overlay::Off => return None,
        };
        let t = self.ctx.load_texture("slide layer", img, egui::TextureOptions::NEAREST);
        self.tex.layer = Some((lk.clone(), t.clone()));
        Some(t)
    }

    pub(crate) fn contour_edges(&mut self, lk: &LayerKey, shown: &Shown) -> Vec<[[f32; 2]; 2]> {
        if let Some((k, e)) = &self.tex.contour
            && k == lk
        {
            return e.clone();
        }
        let e = paint::mask_edges(&agree::top_mask(&agree::view(&shown.map, lk.sign), self.view.top_share));
        self.tex.contour = Some((lk.clone(), e.clone()));
        e
    }

    pub(crate) fn tile_texture(&mut self, key: &Key, shown: &Shown, sign: Sign, scale: f32) -> TextureHandle {
        let tk = (key.clone(), sign.name(), scale.to_bits());
        if let Some(t) = self.tex.tiles.get(&tk) {
            return t.clone();
        }
        let t = self.ctx.load_texture("strip tile", paint::tint_layer(&shown.map, scale, sign), egui::TextureOptions::LINEAR);
        self.tex.tiles.insert(tk, t.clone());
        t
    }

    pub(crate) fn legend_texture(&mut self, sign: Sign) -> TextureHandle {
        if let Some(t) = self.tex.legend.get(sign.name()) {
            return t.clone();
        }
        let t = self.ctx.load_texture("legend", paint::legend_ramp(sign, 256), egui::TextureOptions::LINEAR);
        self.tex.legend.insert(sign.name(), t.clone());
        t
    }
}
