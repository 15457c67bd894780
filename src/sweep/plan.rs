//! Which images a sweep reads: every image below a folder (recursively), each with its group
//! (the first-level sub-folder, or a column of a CSV manifest), and, for one shard of a sweep
//! spread over a cluster, the deterministic slice of them that shard reads.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use serde::{Deserialize, Serialize};

use crate::feed::is_image_file;

/// Where groups come from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Groups {
    /// The first-level sub-folder of the images folder; images at its top form the group
    /// [`TOP_GROUP`].
    Folders,
    /// Column `column` of the CSV `file`, whose `file` or `path` column names each image
    /// relative to the images folder.
    Manifest { file: PathBuf, column: String },
}

impl Groups {
    /// Reads `FILE:COLUMN` (the `--groups` form).
    pub fn parse(s: &str) -> Result<Groups> {
        let (file, column) = s
            .rsplit_once(':')
            .filter(|(f, c)| !f.is_empty() && !c.is_empty())
            .with_context(|| format!("--groups {s}: give the manifest and the column, as FILE:COLUMN (e.g. manifest.csv:site)"))?;
        Ok(Groups::Manifest { file: file.into(), column: column.into() })
    }
}

/// The group of the images that lie at the top of the images folder, not in a sub-folder.
pub const TOP_GROUP: &str = "(top folder)";

/// One slice of a sweep: shard `index` of `count` (1-based, as `--shard K/N`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Shard {
    pub index: usize,
    pub count: usize,
}

impl Shard {
    /// The whole sweep as one shard.
    pub const ALL: Shard = Shard { index: 1, count: 1 };

    /// Reads `K/N` (1 ≤ K ≤ N).
    pub fn parse(s: &str) -> Result<Shard> {
        let bad = || format!("--shard {s}: give K/N with 1 ≤ K ≤ N (e.g. 2/3), or auto");
        let (k, n) = s.split_once('/').with_context(bad)?;
        let (index, count): (usize, usize) = (k.trim().parse().with_context(bad)?, n.trim().parse().with_context(bad)?);
        if index == 0 || index > count {
            bail!(bad());
        }
        Ok(Shard { index, count })
    }

    /// The slice a scheduler's task is: a Slurm array task (SLURM_ARRAY_TASK_ID,
    /// SLURM_ARRAY_TASK_MIN, SLURM_ARRAY_TASK_COUNT; Slurm's sbatch documentation, job arrays) or
    /// a Kubernetes Indexed Job pod (JOB_COMPLETION_INDEX, 0-based; the count is `count`, which
    /// the job's `completions` sets and the pod does not see).
    pub fn from_env(env: &dyn Fn(&str) -> Option<String>, count: Option<usize>) -> Result<Shard> {
        let num = |name: &str| -> Result<Option<usize>> {
            env(name).map(|v| v.trim().parse::<usize>().with_context(|| format!("{name}={v} is not a whole number"))).transpose()
        };
        if let Some(id) = num("SLURM_ARRAY_TASK_ID")? {
            let min = num("SLURM_ARRAY_TASK_MIN")?.unwrap_or(0);
            let n = match (num("SLURM_ARRAY_TASK_COUNT")?, count) {
                (Some(n), _) | (None, Some(n)) => n,
                (None, None) => bail!("SLURM_ARRAY_TASK_ID is set but SLURM_ARRAY_TASK_COUNT is not; give --shard-count N"),
            };
            if id < min || id - min >= n {
                bail!(
                    "Slurm array task {id} does not fit an array of {n} tasks from {min}; submit with --array=MIN-MAX and no step or gaps"
                );
            }
            return Ok(Shard { index: id - min + 1, count: n });
        }
        if let Some(i) = num("JOB_COMPLETION_INDEX")? {
            let n = count.context("JOB_COMPLETION_INDEX is set (a Kubernetes Indexed Job): give --shard-count N, the job's completions")?;
            if i >= n {
                bail!("JOB_COMPLETION_INDEX {i} is not below --shard-count {n}");
            }
            return Ok(Shard { index: i + 1, count: n });
        }
        bail!("--shard auto found neither a Slurm array task (SLURM_ARRAY_TASK_ID) nor a Kubernetes Indexed Job (JOB_COMPLETION_INDEX); give --shard K/N")
    }

    /// The folder a shard writes into, below the sweep's output folder.
    pub fn folder_name(self) -> String {
        format!("shard-{}-of-{}", self.index, self.count)
    }
}

/// One image of a sweep.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Item {
    /// Relative to the images folder, with `/` between parts (the same on every system).
    pub rel: String,
    pub path: PathBuf,
    pub group: String,
}

/// Paths left out of a sweep, as `--exclude` patterns: `*` stands for any run of characters
/// within one part of a path, `?` for one character, `**` for any number of parts. A pattern
/// with no `/` is matched against every part (a folder or file name anywhere: `masks`,
/// `*.seg.png`); one with a `/` against the whole path relative to the images folder
/// (`hillmoor/old/**`). Common practice in the ignore files of version control and build tools.
#[derive(Clone, Debug, Default)]
pub struct Exclude {
    patterns: Vec<String>,
}

impl Exclude {
    pub fn new(patterns: &[String]) -> Result<Exclude> {
        for p in patterns {
            if p.trim().is_empty() {
                bail!("--exclude needs a pattern (a name like masks or *.seg.png, or a path like site/old/**)");
            }
        }
        Ok(Exclude { patterns: patterns.iter().map(|p| p.trim().trim_start_matches("./").trim_end_matches('/').to_string()).collect() })
    }

    /// Whether the relative path `rel` (`/` between parts) is left out.
    pub fn excludes(&self, rel: &str) -> bool {
        let parts: Vec<&str> = rel.split('/').collect();
        self.patterns.iter().any(|p| {
            if p.contains('/') {
                let pat: Vec<&str> = p.split('/').collect();
                // A folder pattern leaves out everything below the folder too.
                (1..=parts.len()).any(|n| glob_parts(&pat, &parts[..n]))
            } else {
                parts.iter().any(|part| glob_part(p.as_bytes(), part.as_bytes()))
            }
        })
    }
}

fn glob_parts(pat: &[&str], parts: &[&str]) -> bool {
    match pat.split_first() {
        None => parts.is_empty(),
        Some((&"**", rest)) => (0..=parts.len()).any(|k| glob_parts(rest, &parts[k..])),
        Some((p, rest)) => !parts.is_empty() && glob_part(p.as_bytes(), parts[0].as_bytes()) && glob_parts(rest, &parts[1..]),
    }
}

fn glob_part(p: &[u8], s: &[u8]) -> bool {
    match p.split_first() {
        None => s.is_empty(),
        Some((b'*', rest)) => (0..=s.len()).any(|k| glob_part(rest, &s[k..])),
        Some((b'?', rest)) => !s.is_empty() && glob_part(rest, &s[1..]),
        Some((c, rest)) => s.first() == Some(c) && glob_part(rest, &s[1..]),
    }
}

/// A path below `root` as the sweep names it: relative, `/` between parts.
fn relative(root: &Path, p: &Path) -> String {
    p.strip_prefix(root).unwrap_or(p).components().map(|c| c.as_os_str().to_string_lossy().into_owned()).collect::<Vec<_>>().join("/")
}

/// Every image below `root` that `exclude` keeps, sorted by relative path, with its group, and
/// the slice `shard` of them: image i (in that order) belongs to shard (i mod N) + 1.
pub fn plan(root: &Path, groups: &Groups, exclude: &Exclude, shard: Shard) -> Result<Vec<Item>> {
    if !root.is_dir() {
        bail!("the images folder {} does not exist or is not a folder", root.display());
    }
    let mut files = vec![];
    walk(root, &mut files)?;
    let found = files.len();
    let mut rels: Vec<(String, PathBuf)> =
        files.into_iter().map(|p| (relative(root, &p), p)).filter(|(rel, _)| !exclude.excludes(rel)).collect();
    rels.sort();
    if found == 0 {
        bail!(
            "the images folder {} holds no image (PNG, JPEG, TIFF, BMP or DICOM files, in it or below it); give the folder that holds the images",
            root.display()
        );
    }
    if rels.is_empty() {
        bail!(
            "all {found} images below {} are left out by the exclude patterns ({}); give fewer or narrower patterns",
            root.display(),
            exclude.patterns.join(", ")
        );
    }
    let lookup = match groups {
        Groups::Folders => None,
        Groups::Manifest { file, column } => Some(read_groups(file, column, root)?),
    };
    let mut items = vec![];
    for (i, (rel, path)) in rels.into_iter().enumerate() {
        if i % shard.count != shard.index - 1 {
            continue;
        }
        let group = match &lookup {
            None => rel.split_once('/').map_or(TOP_GROUP.to_string(), |(g, _)| g.to_string()),
            Some(m) => m.get(&rel).cloned().unwrap_or_else(|| "(not in the manifest)".to_string()),
        };
        items.push(Item { rel, path, group });
    }
    Ok(items)
}

/// Image files below `dir`, following no links out of the folder; skips the sweep's own
/// outputs should they lie inside.
fn walk(dir: &Path, out: &mut Vec<PathBuf>) -> Result<()> {
    let rd = std::fs::read_dir(dir).with_context(|| format!("cannot list folder {}", dir.display()))?;
    let mut entries: Vec<PathBuf> = rd.filter_map(|e| e.ok().map(|e| e.path())).collect();
    entries.sort();
    for p in entries {
        let meta = std::fs::symlink_metadata(&p).with_context(|| format!("cannot read {}", p.display()))?;
        if meta.is_dir() {
            walk(&p, out)?;
        } else if meta.is_file() && is_image_file(&p) {
            out.push(p);
        }
    }
    Ok(())
}

/// Relative path (to the images folder) → group, from a CSV manifest whose paths are relative
/// to the manifest's own folder or to the images folder.
pub fn read_groups(file: &Path, column: &str, root: &Path) -> Result<HashMap<String, String>> {
    let here = file.parent().unwrap_or(Path::new("."));
    let (here_abs, root_abs) = (std::path::absolute(here)?, std::path::absolute(root)?);
    let mut r = csv::Reader::from_path(file).with_context(|| format!("cannot read the groups manifest {}", file.display()))?;
    let headers = r.headers().with_context(|| format!("the groups manifest {} has no header row", file.display()))?.clone();
    let find = |name: &str| headers.iter().position(|h| h.trim() == name);
    let path_col = find("file").or_else(|| find("path")).with_context(|| {
        format!("the groups manifest {} has no `file` or `path` column naming the images; its columns: {}", file.display(), headers.iter().collect::<Vec<_>>().join(", "))
    })?;
    let group_col = find(column).with_context(|| {
        format!("the groups manifest {} has no column `{column}`; its columns: {}", file.display(), headers.iter().collect::<Vec<_>>().join(", "))
    })?;
    let mut m = HashMap::new();
    for (i, rec) in r.records().enumerate() {
        let rec = rec.with_context(|| format!("line {} of the groups manifest {} is not valid CSV", i + 2, file.display()))?;
        let (Some(p), Some(g)) = (rec.get(path_col), rec.get(group_col)) else { continue };
        let p = p.trim().trim_start_matches("./").replace('\\', "/");
        // Relative to the manifest's folder, when that lands inside the images folder.
        if let Ok(rel) = normalise(&here_abs.join(&p)).strip_prefix(&root_abs) {
            m.insert(relative(Path::new(""), rel), g.trim().to_string());
        }
        m.entry(p).or_insert_with(|| g.trim().to_string());
    }
    Ok(m)
}

/// `FOLDER/manifest.csv:COLUMN` (the `--groups` form) when `images` holds a `manifest.csv` whose
/// header names the images (`file` or `path`) and has `column`; `None` otherwise. The inspector
/// offers it for a folder whose images all lie at its top (the demo's, grouped by `site`).
pub fn manifest_groups(images: &Path, column: &str) -> Option<String> {
    let file = images.join("manifest.csv");
    let mut r = csv::Reader::from_path(&file).ok()?;
    let headers = r.headers().ok()?;
    let has = |name: &str| headers.iter().any(|h| h.trim() == name);
    ((has("file") || has("path")) && has(column)).then(|| format!("{}:{column}", file.display()))
}

/// `a/b/../c` → `a/c`, without touching the file system.
fn normalise(p: &Path) -> PathBuf {
    let mut out = PathBuf::new();
    for c in p.components() {
        match c {
            std::path::Component::ParentDir => {
                out.pop();
            }
            std::path::Component::CurDir => {}
            c => out.push(c),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_from_text_and_from_the_schedulers() {
        assert_eq!(Shard::parse("2/3").unwrap(), Shard { index: 2, count: 3 });
        assert!(Shard::parse("0/3").is_err() && Shard::parse("4/3").is_err() && Shard::parse("x").is_err());
        // Slurm documents SLURM_ARRAY_TASK_ID, _MIN and _COUNT for job arrays (sbatch man page).
        let slurm = |k: &str| match k {
            "SLURM_ARRAY_TASK_ID" => Some("7".into()),
            "SLURM_ARRAY_TASK_MIN" => Some("5".into()),
            "SLURM_ARRAY_TASK_COUNT" => Some("3".into()),
            _ => None,
        };
        assert_eq!(Shard::from_env(&slurm, None).unwrap(), Shard { index: 3, count: 3 });
        // Kubernetes Indexed Jobs set JOB_COMPLETION_INDEX from 0 (Kubernetes documentation).
        let k8s = |k: &str| (k == "JOB_COMPLETION_INDEX").then(|| "0".to_string());
        assert_eq!(Shard::from_env(&k8s, Some(4)).unwrap(), Shard { index: 1, count: 4 });
        assert!(Shard::from_env(&k8s, None).unwrap_err().to_string().contains("--shard-count"));
        assert!(Shard::from_env(&|_| None, None).is_err());
    }

    #[test]
    fn shards_split_the_sorted_list_without_overlap() {
        let dir = tempfile::tempdir().unwrap();
        for g in ["a", "b"] {
            std::fs::create_dir_all(dir.path().join(g)).unwrap();
            for i in 0..4 {
                std::fs::write(dir.path().join(g).join(format!("{i}.png")), b"x").unwrap();
            }
        }
        std::fs::write(dir.path().join("top.png"), b"x").unwrap();
        std::fs::write(dir.path().join("notes.txt"), b"x").unwrap();
        let all = plan(dir.path(), &Groups::Folders, &Exclude::default(), Shard::ALL).unwrap();
        assert_eq!(all.len(), 9);
        assert_eq!(all[0].rel, "a/0.png");
        assert_eq!(all[0].group, "a");
        assert_eq!(all.last().unwrap().group, TOP_GROUP);
        let mut joined: Vec<String> = (1..=3).flat_map(|k| plan(dir.path(), &Groups::Folders, &Exclude::default(), Shard { index: k, count: 3 }).unwrap()).map(|i| i.rel).collect();
        joined.sort();
        assert_eq!(joined, all.iter().map(|i| i.rel.clone()).collect::<Vec<_>>());
    }

    #[test]
    fn an_empty_folder_or_one_left_out_entirely_is_an_error_that_says_so() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("notes.txt"), b"x").unwrap();
        let e = plan(dir.path(), &Groups::Folders, &Exclude::default(), Shard::ALL).unwrap_err().to_string();
        assert!(e.contains("holds no image"), "{e}");
        std::fs::create_dir_all(dir.path().join("masks")).unwrap();
        std::fs::write(dir.path().join("masks/a.png"), b"x").unwrap();
        let e = plan(dir.path(), &Groups::Folders, &Exclude::new(&["masks".into()]).unwrap(), Shard::ALL).unwrap_err().to_string();
        assert!(e.contains("left out by the exclude patterns (masks)"), "{e}");
        // A manifest with the images and the column is offered as groups; without, nothing.
        assert_eq!(manifest_groups(dir.path(), "site"), None);
        std::fs::write(dir.path().join("manifest.csv"), "file,site\nmasks/a.png,north-quay\n").unwrap();
        let offered = manifest_groups(dir.path(), "site").unwrap();
        assert_eq!(offered, format!("{}:site", dir.path().join("manifest.csv").display()));
        assert_eq!(manifest_groups(dir.path(), "label"), None);
        let by_site = plan(dir.path(), &Groups::parse(&offered).unwrap(), &Exclude::default(), Shard::ALL).unwrap();
        assert_eq!(by_site.iter().map(|i| i.group.as_str()).collect::<Vec<_>>(), vec!["north-quay"]);
        // A shard of a folder with fewer images than shards is empty, and fine.
        let none = plan(dir.path(), &Groups::Folders, &Exclude::default(), Shard { index: 2, count: 2 }).unwrap();
        assert!(none.is_empty());
    }
}

#[cfg(test)]
mod exclude_tests {
    use super::*;

    #[test]
    fn patterns_leave_out_names_anywhere_and_paths_from_the_top() {
        let x = Exclude::new(&["masks".into(), "*.seg.png".into(), "hillmoor/old/**".into(), "a?c/x.png".into()]).unwrap();
        assert!(x.excludes("masks/0001.tag.png"));
        assert!(x.excludes("hillmoor/masks/0001.png"));
        assert!(x.excludes("north-quay/0003.seg.png"));
        assert!(x.excludes("hillmoor/old/2019/a.png"));
        assert!(x.excludes("abc/x.png"));
        assert!(!x.excludes("hillmoor/0005.png"));
        assert!(!x.excludes("saltmarsh/old/a.png"), "a pattern with a / is anchored at the top");
        assert!(!x.excludes("masksx/0001.png"), "a name matches a whole part");
        assert!(!x.excludes("abbc/x.png"));
        assert!(Exclude::new(&[" ".into()]).is_err());
    }
}
