//! The desktop inspector: a model, its images, readings tinted over them, baselines side by side.
//!
//! Layout of the code (immediate mode, egui): [`state`] holds plain data (session, image list,
//! readings cache, selection, view settings); each panel in [`panels`] is a function that draws
//! that state and pushes [`app::Intent`]s; [`app::Inspector`] applies the intents, starts jobs on
//! worker threads ([`work`]) and takes their results off a channel at the start of every frame.
//! The frame never waits for the engine. Nothing here computes an attribution or a figure: maps
//! come from `spurion::methods`, region figures from `spurion::regions`, agreement and rank
//! figures from `spurion::methods::agree`; this module only turns them into pixels and text.

pub mod app;
pub mod engine;
pub mod export;
pub mod form;
pub mod look;
pub mod paint;
pub mod panels;
pub mod recent;
pub mod state;
pub mod work;

use std::path::{Path, PathBuf};

pub use app::{Inspector, InspectorConfig};

/// What the inspector opens with. Empty means the bundled sample model and demo images.
#[derive(Clone, Debug, Default)]
pub struct GuiOptions {
    pub model: Option<PathBuf>,
    pub paths: Vec<PathBuf>,
}

/// Opens the inspector window and runs until it is closed.
pub fn run(opts: GuiOptions) -> anyhow::Result<()> {
    let config = InspectorConfig::for_desktop();
    let native = eframe::NativeOptions {
        viewport: egui::ViewportBuilder::default()
            .with_title("spurion inspector")
            .with_inner_size([1360.0, 860.0])
            .with_min_inner_size([900.0, 600.0])
            .with_drag_and_drop(true),
        ..Default::default()
    };
    eframe::run_native(
        "spurion",
        native,
        Box::new(move |cc| {
            look::apply(&cc.egui_ctx);
            Ok(Box::new(Inspector::new(cc.egui_ctx.clone(), opts, config)))
        }),
    )
    .map_err(|e| {
        anyhow::anyhow!(
            "cannot open the inspector window: {e}. The inspector needs a graphical display \
             (X11 or Wayland); on a headless machine use the `spurion` command-line subcommands \
             instead, or run under Xvfb."
        )
    })
}

/// The bundled sample model and demo folder, looked for in the current folder first and then in
/// the crate folder the program was built from.
pub fn default_inputs() -> (Option<PathBuf>, Vec<PathBuf>) {
    let roots: Vec<PathBuf> = [std::env::current_dir().ok(), Some(PathBuf::from(env!("CARGO_MANIFEST_DIR")))]
        .into_iter()
        .flatten()
        .collect();
    let find = |rel: &str| roots.iter().map(|r| r.join(rel)).find(|p| p.exists());
    let model = find("sample-models/shortcut.onnx");
    let demo = find("assets/demo");
    (model, demo.into_iter().collect())
}

/// A path shortened for labels: the file name, or the whole path if it has none.
pub(crate) fn short_name(p: &Path) -> String {
    p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| p.display().to_string())
}
