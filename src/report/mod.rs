//! The files spurion writes for other tools and people to read, as typed, serialisable values
//! built from the engine's results (so every front end writes the same file): a reading's
//! `reading.json`, a review's `review.json`, a sweep's tables, pictures and report, and a cleaned
//! copy's check (`clean.rs`).

pub mod clean;
mod feed;
mod reading;
mod review;
pub mod sweep;

pub use feed::{FeedRecord, PictureFeed, tensor_from_reading};
pub use reading::{PatientData, ReadingFile, SourceFacts};
pub use review::{ReviewFile, StripFile};
