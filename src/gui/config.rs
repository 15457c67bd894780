//! How the inspector behaves on start and where it keeps its small files.

use std::path::{Path, PathBuf};

use super::recent;

/// Where the inspector keeps its small files, and how it behaves on start.
#[derive(Clone, Debug)]
pub struct InspectorConfig {
    /// The recent-files list (None: not remembered).
    pub recent_file: Option<PathBuf>,
    /// Use rfd dialogs (off in headless tests: no desktop to show them on).
    pub dialogs: bool,
    /// Fill the baseline strip once the first reading is in, so the first view already compares
    /// baselines (on the desktop unless SPURION_INSPECTOR_STRIP=0; off in headless tests).
    pub strip_on_start: bool,
    /// Write UI pass times (median, p90, max) to this file every 100 frames.
    pub frame_log: Option<PathBuf>,
}

impl InspectorConfig {
    pub fn for_desktop() -> InspectorConfig {
        InspectorConfig {
            recent_file: recent::default_file(),
            dialogs: true,
            strip_on_start: std::env::var_os("SPURION_INSPECTOR_STRIP").is_none_or(|v| v != "0"),
            frame_log: std::env::var_os("SPURION_FRAME_LOG").map(PathBuf::from),
        }
    }

    /// No dialogs, recent files in `dir` (tests and benchmarks).
    pub fn headless(dir: &Path) -> InspectorConfig {
        InspectorConfig {
            recent_file: Some(dir.join("recent.json")),
            dialogs: false,
            strip_on_start: false,
            frame_log: None,
        }
    }
}

