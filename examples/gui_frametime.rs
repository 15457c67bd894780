//! Frame-time measurement of the inspector while an integrated-gradients reading computes.
//!
//!     cargo run --example gui_frametime [-- STEPS]
//!
//! Drives the real UI headless (egui_kittest) at a 60 Hz pace and times each frame's UI pass
//! (taking results off the channel, layout, painting commands) while the worker threads compute.
//! The GPU upload and presentation of a real window are not included; `scripts/screenshot.sh`
//! with SPURION_FRAME_LOG gives the same figure from the real window under Xvfb.
//! A measurement, not a test: it prints figures and asserts nothing.

use std::path::PathBuf;
use std::time::{Duration, Instant};

use egui_kittest::Harness;
use spurion::gui::{GuiOptions, Inspector, InspectorConfig};

fn main() {
    let steps: usize = std::env::args().nth(1).and_then(|s| s.parse().ok()).unwrap_or(256);
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let images = spurion::feed::list_images(&root.join("assets/demo")).expect("demo set in assets/demo");
    let tmp = std::env::temp_dir().join(format!("spurion-frametime-{}", std::process::id()));
    std::fs::create_dir_all(&tmp).unwrap();
    let mut app = Inspector::new(
        egui::Context::default(),
        GuiOptions { model: Some(root.join("sample-models/shortcut.onnx")), paths: vec![images[0].clone()], ledger: None },
        InspectorConfig::headless(&tmp),
    );
    app.form.steps = steps;
    let mut h = Harness::builder().with_size([1440.0, 900.0]).build_ui_state(|ui, app: &mut Inspector| app.frame(ui), app);

    // Wait until the image is open, so the frames measured are those during the reading.
    let t = Instant::now();
    while h.state().current_prepared().is_none() {
        h.step();
        std::thread::sleep(Duration::from_millis(10));
        assert!(t.elapsed() < Duration::from_secs(120), "the model or image did not open");
    }
    let mut during = Vec::new();
    let started = Instant::now();
    loop {
        let t0 = Instant::now();
        h.step();
        let dt = t0.elapsed();
        let computing = h.state().slide_job.is_some();
        if computing {
            during.push(dt);
        } else if h.state().current_shown().is_some() {
            break;
        }
        // 60 Hz pacing: the next frame starts 16.7 ms after this one started.
        std::thread::sleep(Duration::from_micros(16_667).saturating_sub(dt));
        assert!(started.elapsed() < Duration::from_secs(600), "the reading did not finish");
    }
    let reading = started.elapsed();
    println!("integrated gradients, {steps} steps, {} ({}):", images[0].display(), h.state().form.method.entry().title);
    println!("  reading took {:.2} s wall time", reading.as_secs_f64());
    println!("  UI pass while computing: {}", spurion::gui::app::frame_stats(&during, true).trim());
    let _ = std::fs::remove_dir_all(&tmp);
}
