//! The panels. Each draws the state it is given and pushes intents; settings that are plain
//! values (the form, the view settings) are edited in place, as egui widgets do.

mod about;
mod bars;
mod controls;
mod plot;
mod review;
mod review_strip;
mod slide;
mod strip;

pub use about::{about, drop_hint};
pub use bars::{image_list, status_bar, top_bar};
pub use controls::controls;
pub use review::{cascade_text, convergence_text, deletion_text, insertion_text, review_panel, shapley_sum_text};
pub use review_strip::{TILE_KEYS, tile_key_name};
pub use slide::slide;
pub use strip::{agreement_cell_overlap, agreement_cell_rho, strip_panel};

fn fmt_value(v: f32) -> String {
    crate::render::format_value(v, true)
}

/// What painting a region out did, as the slide and the figures list say it: the change of the
/// target's probability, and the top class when it changed.
fn removal_text(r: &crate::regions::Removal, top_before: usize) -> String {
    let flip = if r.top != top_before { format!(", top class → {}", r.top) } else { String::new() };
    format!("painted out: probability {:+.2}{flip}", -r.probability_drop)
}

fn fmt_opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("—".to_string(), |x| format!("{x:.digits$}"))
}
