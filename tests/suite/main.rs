//! spurion's integration tests, in one test binary (each file a module) so that the tests link
//! tract, egui and eframe once instead of once per file.

mod common;
mod cli_explain;
mod demo_generator;
mod demo_models;
mod dicom_cli;
mod dicom_common;
mod dicom_errors;
mod dicom_reference;
mod dicom_write;
mod engine_ops;
mod engine_torch;
mod engine_whole;
mod gui_curate;
mod gui_inspector;
mod ledger;
mod ledger_disk;
mod methods_reference;
mod occlusion_incremental;
mod regions_clean;
mod removal;
mod review_cascade;
mod review_cli;
mod review_compare;
mod review_half;
mod review_linear;
mod review_run;
mod review_sample;
mod review_shapley;
mod regions_demo;
mod regions_e2e;
mod regions_figures;
mod regions_finders;
mod regions_flag;
mod sweep;
mod window_values;
