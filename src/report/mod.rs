//! The files spurion writes for other tools and people to read, as typed, serialisable values
//! built from the engine's results (so every front end writes the same file).

mod reading;
mod review;
mod sweep;

pub use reading::{PatientData, ReadingFile, SourceFacts, assess_input};
pub use review::{ReviewFile, StripFile};
pub use sweep::sweep_html;
