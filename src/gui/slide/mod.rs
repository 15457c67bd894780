//! The slide and its reading: opening models and images ([`open`]), the readings the slide and
//! the baseline strip want ([`readings`]), the engine calls their workers make ([`engine`]),
//! turning maps into pixels ([`paint`]) and textures ([`textures`]), and the exports of what the
//! slide shows ([`export`]). The panel that draws the slide is `panels::slide`.

pub mod engine;
pub mod export;
mod open;
pub mod paint;
mod readings;
pub mod textures;
