//! The files spurion writes for other tools and people to read, as typed, serialisable values
//! built from the engine's results (so every front end writes the same file).

mod reading;

pub use reading::{PatientData, ReadingFile, SourceFacts, assess_input};
