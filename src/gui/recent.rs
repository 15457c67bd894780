//! Recently opened models and images, remembered in a small JSON file in the user's config
//! folder ($XDG_CONFIG_HOME/spurion/recent.json, else ~/.config/spurion/recent.json).

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

const KEEP: usize = 12;

#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct Recent {
    #[serde(default)]
    pub models: Vec<PathBuf>,
    /// Image files and folders.
    #[serde(default)]
    pub images: Vec<PathBuf>,
}

/// Where the list lives on this desktop, if a config folder can be found at all.
pub fn default_file() -> Option<PathBuf> {
    let base = std::env::var_os("XDG_CONFIG_HOME")
        .filter(|v| !v.is_empty())
        .map(PathBuf::from)
        .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".config")))?;
    Some(base.join("spurion").join("recent.json"))
}

impl Recent {
    /// Reads the list; a missing or damaged file gives an empty list (and the damage is said in
    /// the returned note, because losing the list is harmless but should not be silent).
    pub fn load(file: &Path) -> (Recent, Option<String>) {
        match std::fs::read_to_string(file) {
            Err(_) => (Recent::default(), None),
            Ok(text) => match serde_json::from_str(&text) {
                Ok(r) => (r, None),
                Err(e) => (
                    Recent::default(),
                    Some(format!("the recent-files list {} is damaged ({e}); starting a new one", file.display())),
                ),
            },
        }
    }

    pub fn save(&self, file: &Path) -> anyhow::Result<()> {
        use anyhow::Context;
        if let Some(dir) = file.parent() {
            std::fs::create_dir_all(dir).with_context(|| format!("cannot create {}", dir.display()))?;
        }
        let text = serde_json::to_string_pretty(self)?;
        std::fs::write(file, text).with_context(|| format!("cannot write the recent-files list {}", file.display()))
    }

    fn push(list: &mut Vec<PathBuf>, p: &Path) {
        let p = std::fs::canonicalize(p).unwrap_or_else(|_| p.to_path_buf());
        list.retain(|q| q != &p);
        list.insert(0, p);
        list.truncate(KEEP);
    }

    pub fn add_model(&mut self, p: &Path) {
        Self::push(&mut self.models, p);
    }

    pub fn add_images(&mut self, p: &Path) {
        Self::push(&mut self.images, p);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_keeps_order_and_drops_duplicates() {
        let dir = tempfile::tempdir().unwrap();
        let file = dir.path().join("sub").join("recent.json");
        let mut r = Recent::default();
        r.add_model(Path::new("/nowhere/a.onnx"));
        r.add_model(Path::new("/nowhere/b.onnx"));
        r.add_model(Path::new("/nowhere/a.onnx"));
        r.save(&file).unwrap();
        let (back, note) = Recent::load(&file);
        assert!(note.is_none());
        assert_eq!(back.models, vec![PathBuf::from("/nowhere/a.onnx"), PathBuf::from("/nowhere/b.onnx")]);
    }

    #[test]
    fn damaged_file_is_reported_not_fatal() {
        let dir = tempfile::tempdir().unwrap();
        let file = dir.path().join("recent.json");
        std::fs::write(&file, "{ not json").unwrap();
        let (r, note) = Recent::load(&file);
        assert_eq!(r, Recent::default());
        assert!(note.unwrap().contains("damaged"));
    }
}
