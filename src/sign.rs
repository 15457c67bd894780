//! Which part of a signed attribution map is meant: the one enum the figures (mark share, lift),
//! the agreement figures and the pictures all use.

use serde::{Deserialize, Serialize};

/// A view of a signed map. Positive attribution raises the target score (supporting), negative
/// lowers it (opposing).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Sign {
    /// Positive values (pixels that raise the target score); negative ones count as 0.
    #[default]
    Supporting,
    /// Negative values taken as magnitudes (pixels that lower the score); positive ones count 0.
    Opposing,
    /// The signed values as they are. Shares may then leave 0..1 (support outside a region
    /// partly cancelled by opposition inside it, or the reverse); read them with care.
    Both,
    /// Absolute values.
    Magnitude,
}

impl Sign {
    pub const ALL: [Sign; 4] = [Sign::Supporting, Sign::Opposing, Sign::Both, Sign::Magnitude];

    pub fn name(self) -> &'static str {
        match self {
            Sign::Supporting => "supporting",
            Sign::Opposing => "opposing",
            Sign::Both => "both",
            Sign::Magnitude => "magnitude",
        }
    }

    /// Reads a [`Sign::name`].
    pub fn parse(s: &str) -> Option<Sign> {
        Sign::ALL.into_iter().find(|k| k.name() == s)
    }

    /// One value seen through this view.
    pub fn apply(self, v: f32) -> f32 {
        match self {
            Sign::Supporting => v.max(0.0),
            Sign::Opposing => (-v).max(0.0),
            Sign::Both => v,
            Sign::Magnitude => v.abs(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn views_and_names_round_trip() {
        assert_eq!(Sign::Supporting.apply(-2.0), 0.0);
        assert_eq!(Sign::Opposing.apply(-2.0), 2.0);
        assert_eq!(Sign::Opposing.apply(3.0), 0.0);
        assert_eq!(Sign::Both.apply(-2.0), -2.0);
        assert_eq!(Sign::Magnitude.apply(-2.0), 2.0);
        for s in Sign::ALL {
            assert_eq!(Sign::parse(s.name()), Some(s));
        }
        assert_eq!(Sign::parse("purple"), None);
    }
}
