//! The files of a sweep: the tables, the groups' figures, the atlas pictures, the thumbnails
//! and the self-contained `report.html` ([`files`] writes and reads them, [`html`] builds the
//! report, [`pictures`] draws, [`recurring`] shows the recurring hotspots).

pub mod files;
pub mod html;
pub mod pictures;
pub mod recurring;

pub use files::{RunFacts, read, write};
pub use html::sweep_html;
pub use pictures::ThumbSource;
