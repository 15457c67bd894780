//! The panels. Each draws the state it is given and pushes intents; settings that are plain
//! values (the form, the view settings) are edited in place, as egui widgets do.

mod about;
mod bars;
mod controls;
mod slide;
mod strip;

pub use about::{about, drop_hint};
pub use bars::{image_list, status_bar, top_bar};
pub use controls::controls;
pub use slide::slide;
pub use strip::{agreement_cell_overlap, agreement_cell_rho, strip_panel};

fn fmt_value(v: f32) -> String {
    crate::render::format_value(v, true)
}

fn fmt_opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("—".to_string(), |x| format!("{x:.digits$}"))
}
