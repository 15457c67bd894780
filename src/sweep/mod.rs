//! Sweeps: one reading per image over a whole folder, resumable through a content-addressed
//! cache, sliced into shards for a cluster's scheduler, with dataset-level evidence per group
//! (atlas, flip rate, repeated patches, rates with intervals) and the hotspots that recur across
//! the images ([`recurring`]).
//!
//! The pieces: which images and groups ([`plan`]), one image ([`read`]), the cache
//! ([`cache`]), one shard ([`run`]), joining shards ([`merge`]) and the groups' figures
//! ([`summary`], [`stats`]). The files a sweep writes (tables, atlas pictures, the report) are
//! `report::sweep`'s.

pub mod cache;
pub mod ledger;
pub mod merge;
pub mod plan;
pub mod read;
pub mod recurring;
pub mod row;
pub mod run;
pub mod stats;
pub mod summary;

pub use cache::Cache;
pub use ledger::{SweepLedger, accept_cluster};
pub use merge::merge;
pub use plan::{Exclude, Groups, Item, Shard, plan};
pub use read::Setup;
pub use recurring::{RecurringHotspot, RecurringSettings, find_recurring};
pub use row::Row;
pub use run::{RANKED, ShardResult, Skipped, ranking, run_shard};
pub use summary::{AtlasSum, GroupSummary, GroupsFile, HotBox, summarise};
