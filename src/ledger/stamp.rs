//! When a ledger entry last changed: UTC, to the millisecond, written as RFC 3339
//! (`2026-05-03T10:11:12.345Z`).

use std::fmt;
use std::time::SystemTime;

use anyhow::{Context, Result};
use chrono::{DateTime, SecondsFormat, Utc};
use serde::{Deserialize, Deserializer, Serialize, Serializer};

/// A moment in UTC, kept to the millisecond (what the file can say), so a stamp read back
/// equals the one written.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Stamp(DateTime<Utc>);

impl Stamp {
    pub fn now() -> Stamp {
        Stamp::from_millis(DateTime::<Utc>::from(SystemTime::now()).timestamp_millis())
    }

    /// From milliseconds since 1970-01-01T00:00:00Z (0 for a value out of chrono's range).
    pub fn from_millis(ms: i64) -> Stamp {
        Stamp(DateTime::from_timestamp_millis(ms).unwrap_or_default())
    }

    pub fn millis(self) -> i64 {
        self.0.timestamp_millis()
    }

    /// Reads RFC 3339 (any offset; kept as UTC to the millisecond).
    pub fn parse(s: &str) -> Result<Stamp> {
        let t = DateTime::parse_from_rfc3339(s.trim()).with_context(|| {
            format!("\"{s}\" is not a time in RFC 3339 form (e.g. 2026-05-03T10:11:12.345Z)")
        })?;
        Ok(Stamp::from_millis(t.timestamp_millis()))
    }
}

impl fmt::Display for Stamp {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0.to_rfc3339_opts(SecondsFormat::Millis, true))
    }
}

impl Serialize for Stamp {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

impl<'de> Deserialize<'de> for Stamp {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Stamp, D::Error> {
        let s = String::deserialize(d)?;
        Stamp::parse(&s).map_err(|e| serde::de::Error::custom(format!("{e:#}")))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_stamp_reads_back_as_written_and_orders_by_time() {
        let t = Stamp::parse("2026-05-03T10:11:12.345Z").unwrap();
        assert_eq!(t.to_string(), "2026-05-03T10:11:12.345Z");
        // An offset is taken to UTC (RFC 3339 section 4.2: local time minus the offset).
        assert_eq!(Stamp::parse("2026-05-03T12:11:12.345+02:00").unwrap(), t);
        assert!(Stamp::parse("2026-05-03T10:11:12.346Z").unwrap() > t);
        let now = Stamp::now();
        assert_eq!(Stamp::parse(&now.to_string()).unwrap(), now);
        assert!(Stamp::parse("yesterday").is_err());
        assert_eq!(Stamp::from_millis(0).to_string(), "1970-01-01T00:00:00.000Z");
    }
}
