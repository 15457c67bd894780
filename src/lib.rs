//! spurion: shows what an image classifier is looking at, and catches it when the answer is a
//! shortcut (a burned-in mark or a border band instead of the anatomy).
//!
//! The modules follow the pipeline: [`feed`] (feed card, images and tensors in) → [`model`]
//! (ONNX on CPU, forward) and [`grad`] (exact reverse pass), both over [`graph`] (tract plans
//! and window geometry) → [`methods`] (attribution methods and baselines, producing a
//! [`methods::Reading`]) → [`regions`] (border bands, burned-in marks and the figures over them)
//! → [`review`] (the reviewer's tests of a reading) and [`sweep`] (one reading per image over a
//! folder, with each group's figures) → [`report`] (the files written) → presentation
//! ([`render`] for pictures, [`cli`], [`gui`]). [`ledger`] keeps the curator's verdicts, notes
//! and drawn regions (it uses [`regions`]).
//! [`sign`] and [`control`] sit below everything. Imports point one way: the engine (feed,
//! model, grad, methods, regions) never imports render, report, cli or gui, and neither front
//! end imports the other; the binary picks the front end.
//!
//! spurion is a research and data-quality tool, not a diagnostic device.

pub mod clean;
pub mod control;
pub mod demo;
pub mod feed;
pub mod grad;
pub mod graph;
pub mod ledger;
pub mod methods;
pub mod model;
pub mod regions;
pub mod render;
pub mod report;
pub mod review;
pub mod sign;
pub mod sweep;

pub mod cli;
pub mod gui;

/// The caution every front end shows. One wording, kept here so the CLI, GUI and reports agree.
pub const CAUTION: &str = "spurion is a research and data-quality tool, not a diagnostic device. \
An attribution map is a hint about what a model responds to, not proof of what it does. \
Any clinical use defers to local regulation and licensed practice.";
