//! Image keys: an image's path relative to the dataset's root, with `/` between folders.

use std::path::{Component, Path, PathBuf};

use anyhow::{Context, Result, bail};

/// The folder a file is in (`.` for a bare file name).
pub fn folder_of(file: &Path) -> PathBuf {
    match file.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// The root folder a ledger at `ledger` records as `root`.
pub fn root_dir(ledger: &Path, root: &str) -> PathBuf {
    let r = Path::new(root);
    match root {
        "." => folder_of(ledger),
        _ if r.is_absolute() => r.to_path_buf(),
        _ => folder_of(ledger).join(r),
    }
}

/// `path` made absolute from the current folder, with `.` and `..` folded away by text.
pub fn absolute(path: &Path) -> Result<PathBuf> {
    let abs = std::path::absolute(path).with_context(|| format!("cannot make {} an absolute path", path.display()))?;
    let mut out = PathBuf::new();
    for c in abs.components() {
        match c {
            Component::ParentDir => {
                out.pop();
            }
            Component::CurDir => {}
            other => out.push(other),
        }
    }
    Ok(out)
}

/// How a ledger at `ledger` records the root folder `root`: relative to the ledger's folder
/// when `root` is given relative and lies at or below that folder, else absolute.
pub fn root_text(ledger: &Path, root: &Path) -> Result<String> {
    let folder = absolute(&folder_of(ledger))?;
    let abs = absolute(root)?;
    if root.is_relative()
        && let Ok(rel) = abs.strip_prefix(&folder)
    {
        let k = join_components(rel)?;
        return Ok(if k.is_empty() { ".".to_string() } else { k });
    }
    abs.to_str().map(str::to_string).with_context(|| format!("the root folder {} is not valid UTF-8", abs.display()))
}

/// Path components joined with `/`; an error for a component that is not UTF-8.
fn join_components(rel: &Path) -> Result<String> {
    let parts = rel
        .components()
        .map(|c| c.as_os_str().to_str().with_context(|| format!("{} is not valid UTF-8", rel.display())))
        .collect::<Result<Vec<_>>>()?;
    Ok(parts.join("/"))
}

/// The key of `image` under `root`: tried as written (from the current folder), then with
/// links resolved, then as a path relative to the root.
pub fn key_for(root: &Path, image: &Path) -> Result<String> {
    let root_abs = absolute(root)?;
    let img_abs = absolute(image)?;
    if let Ok(rel) = img_abs.strip_prefix(&root_abs) {
        return checked(join_components(rel)?, image);
    }
    if let (Ok(r), Ok(i)) = (root.canonicalize(), image.canonicalize())
        && let Ok(rel) = i.strip_prefix(&r)
    {
        return checked(join_components(rel)?, image);
    }
    if image.is_relative() && root.join(image).exists() {
        let joined = absolute(&root_abs.join(image))?;
        if let Ok(rel) = joined.strip_prefix(&root_abs) {
            return checked(join_components(rel)?, image);
        }
    }
    bail!(
        "image {} is not inside the ledger's root folder {}. Give a path inside that folder (as seen from \
         here, or relative to the root), or keep this dataset in its own ledger",
        image.display(),
        root_abs.display()
    )
}

fn checked(key: String, image: &Path) -> Result<String> {
    if key.is_empty() {
        bail!("{} is the ledger's root folder itself, not an image in it", image.display());
    }
    validate(&key)?;
    Ok(key)
}

/// A key must be a relative path with `/` between plain names (no `.`, `..` or empty part).
pub fn validate(key: &str) -> Result<()> {
    let bad = key.is_empty()
        || key.starts_with('/')
        || key.split('/').any(|p| p.is_empty() || p == "." || p == "..")
        || key.contains('\0');
    if bad {
        bail!(
            "\"{key}\" is not an image path relative to the ledger's root (expected names joined by '/', \
             e.g. hillmoor/0005.png, with no '.', '..' or leading '/')"
        );
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keys_are_relative_to_the_root_with_slashes_from_any_form_of_the_path() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path().join("data");
        std::fs::create_dir_all(root.join("hillmoor")).unwrap();
        std::fs::write(root.join("hillmoor/a.png"), b"x").unwrap();
        let abs = root.join("hillmoor/a.png");
        assert_eq!(key_for(&root, &abs).unwrap(), "hillmoor/a.png");
        assert_eq!(key_for(&root, &root.join("hillmoor/../hillmoor/./a.png")).unwrap(), "hillmoor/a.png");
        // Relative to the root when it does not lead into the root from the current folder.
        assert_eq!(key_for(&root, Path::new("hillmoor/a.png")).unwrap(), "hillmoor/a.png");
        let e = key_for(&root, &dir.path().join("elsewhere.png")).unwrap_err().to_string();
        assert!(e.contains("elsewhere.png") && e.contains("not inside"), "{e}");
        assert!(key_for(&root, &root).is_err());
    }

    #[test]
    fn the_root_is_written_relative_to_the_ledger_when_it_can_be() {
        let l = Path::new("/data/set/spurion-ledger.json");
        assert_eq!(root_text(l, Path::new("/elsewhere")).unwrap(), "/elsewhere");
        assert_eq!(root_dir(l, "."), PathBuf::from("/data/set"));
        assert_eq!(root_dir(l, "/x"), PathBuf::from("/x"));
        assert_eq!(folder_of(Path::new("ledger.json")), PathBuf::from("."));
    }

    #[test]
    fn bad_keys_are_refused() {
        for k in ["", "/a.png", "a//b.png", "../a.png", "a/./b.png"] {
            assert!(validate(k).is_err(), "{k}");
        }
        validate("hillmoor/0005.png").unwrap();
    }
}
