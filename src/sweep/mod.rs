//! Sweeps: one reading per image over a whole folder, resumable through a content-addressed
//! cache, sliced into shards for a cluster's scheduler, with dataset-level evidence per group
//! (atlas, flip rate, repeated patches, rates with intervals) and a self-contained report.
//!
//! The pieces: which images and groups ([`plan`]), one image ([`read`]), the cache
//! ([`cache`]), one shard ([`run`]), the groups' figures ([`summary`], [`stats`]) and the files
//! ([`output`]).

pub mod cache;
pub mod output;
pub mod plan;
pub mod read;
pub mod row;
pub mod run;
pub mod stats;
pub mod summary;

pub use cache::Cache;
pub use output::{RunFacts, merge, read as read_output, write as write_output};
pub use plan::{Groups, Item, Shard, plan};
pub use read::Setup;
pub use row::Row;
pub use run::{ShardResult, Skipped, run_shard};
pub use summary::{AtlasSum, GroupSummary, HotBox};
