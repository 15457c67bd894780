//! `spurion ledger`: a curator's verdicts, notes and drawn regions from the command line. A
//! command that changes the ledger exits 0 only once the change is on disk.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use clap::{Args, Subcommand};

use crate::ledger::{self, Change, DiskWriter, Edit, Ledger, Prefer, Stamp, Verdict};
use crate::regions::drawn::{DrawnFile, DrawnShape, Shape, drawn_region, load_drawn, save_drawn};

#[derive(Args, Debug)]
pub struct LedgerArgs {
    #[command(subcommand)]
    pub command: LedgerCommand,
}

#[derive(Subcommand, Debug)]
pub enum LedgerCommand {
    /// Sets an image's verdict and/or note; exits 0 only once the change is on disk.
    Set(SetArgs),
    /// Prints the ledger as a table (or JSON).
    Show(ShowArgs),
    /// Writes the ledger as CSV (image, verdict, note, drawn_regions, image_width, image_height, changed).
    Export(ExportArgs),
    /// Merges a CSV into the ledger.
    Import(ImportArgs),
    /// Adds drawn regions to an image (a box or a polygon), clears them, or brings them in from
    /// or out to a *.drawn.json file.
    Draw(DrawArgs),
    /// Accepts a recurring hotspot of a sweep as a mark: every image of the cluster gets the
    /// verdict marked and the hotspot's box as a drawn region, in one change saved durably.
    AcceptCluster(AcceptClusterArgs),
}

#[derive(Args, Debug)]
pub struct AcceptClusterArgs {
    #[command(flatten)]
    pub ledger: LedgerPath,
    /// The sweep's output folder (its groups.json lists the recurring hotspots).
    #[arg(long)]
    pub sweep: PathBuf,
    /// The cluster's number, as groups.json and report.html give it.
    #[arg(long)]
    pub cluster: usize,
}

#[derive(Args, Debug, Clone)]
pub struct LedgerPath {
    /// The ledger file (a folder means FOLDER/spurion-ledger.json). Made at its first change.
    #[arg(long, short = 'l')]
    pub ledger: PathBuf,
    /// The dataset's folder, which image paths are kept relative to; recorded when the ledger is
    /// made (default: the ledger's own folder).
    #[arg(long)]
    pub root: Option<PathBuf>,
}

#[derive(Args, Debug)]
pub struct SetArgs {
    #[command(flatten)]
    pub ledger: LedgerPath,
    /// The image (absolute, relative to here, or relative to the ledger's root).
    #[arg(long, short = 'i')]
    pub image: PathBuf,
    /// clean | marked | unsure | exclude (or 1 to 4, the inspector's keys) | none.
    #[arg(long, required_unless_present = "note", value_parser = verdict_arg)]
    pub verdict: Option<VerdictArg>,
    /// A free note (replaces the image's note; "" clears it).
    #[arg(long)]
    pub note: Option<String>,
}

/// A verdict or none, as `--verdict` takes it.
#[derive(Clone, Copy, Debug)]
pub struct VerdictArg(Option<Verdict>);

fn verdict_arg(s: &str) -> Result<VerdictArg, String> {
    Verdict::parse(s).map(VerdictArg).map_err(|e| e.to_string())
}

#[derive(Args, Debug)]
pub struct ShowArgs {
    /// The ledger file (or its folder).
    #[arg(long, short = 'l')]
    pub ledger: PathBuf,
    /// Only this image, with its whole note and drawn regions.
    #[arg(long, short = 'i')]
    pub image: Option<PathBuf>,
    /// Print JSON (the ledger's own form) instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Args, Debug)]
pub struct ExportArgs {
    /// The ledger file (or its folder).
    #[arg(long, short = 'l')]
    pub ledger: PathBuf,
    /// The CSV file to write ("-" for the standard output).
    #[arg(long)]
    pub csv: PathBuf,
}

#[derive(Args, Debug)]
pub struct ImportArgs {
    #[command(flatten)]
    pub ledger: LedgerPath,
    /// The CSV to merge (columns as `export` writes them; only `image` is required).
    #[arg(long)]
    pub csv: PathBuf,
    /// Where a row and the ledger differ on an image: newer (the one changed later), csv, or ledger.
    #[arg(long, default_value = "newer", value_parser = ["newer", "csv", "ledger"])]
    pub prefer: String,
}

#[derive(Args, Debug)]
#[command(group = clap::ArgGroup::new("what").required(true).args(["bbox", "polygon", "clear", "from", "to"]))]
pub struct DrawArgs {
    #[command(flatten)]
    pub ledger: LedgerPath,
    /// The image the regions are drawn on.
    #[arg(long, short = 'i')]
    pub image: PathBuf,
    /// A box x0,y0,x1,y1 in image pixels (x the column, y the row; far edges exclusive).
    #[arg(long = "box", value_name = "X0,Y0,X1,Y1")]
    pub bbox: Option<String>,
    /// A polygon x,y,x,y,x,y,... (three points or more) in image pixels.
    #[arg(long, value_name = "X,Y,X,Y,...")]
    pub polygon: Option<String>,
    /// What the region shows, e.g. "ruler".
    #[arg(long, default_value = "")]
    pub label: String,
    /// Removes the image's drawn regions.
    #[arg(long)]
    pub clear: bool,
    /// Adds the regions of a *.drawn.json file.
    #[arg(long, value_name = "FILE")]
    pub from: Option<PathBuf>,
    /// Writes the image's drawn regions to a *.drawn.json file (the ledger is not changed).
    #[arg(long, value_name = "FILE")]
    pub to: Option<PathBuf>,
}

pub fn run(a: &LedgerArgs) -> Result<()> {
    match &a.command {
        LedgerCommand::Set(a) => set_verdict(a).map(|said| println!("{said}")),
        LedgerCommand::Show(a) => show(a),
        LedgerCommand::Export(a) => export(a),
        LedgerCommand::Import(a) => import(a),
        LedgerCommand::Draw(a) => draw(a),
        LedgerCommand::AcceptCluster(a) => accept_cluster(a),
    }
}

/// The ledger a command changes: the file as it is, or a new one (its folder must exist).
fn for_change(p: &LedgerPath) -> Result<(PathBuf, Ledger)> {
    let path = Ledger::file_for(&p.ledger);
    let ledger = match ledger::load(&path)? {
        Some(l) => {
            if let Some(r) = &p.root {
                let (have, want) = (absolute(&l.root_dir())?, absolute(r)?);
                if have != want {
                    bail!(
                        "the ledger {} keeps images relative to {}, not {} (--root): leave out --root, or use \
                         another ledger for that folder",
                        path.display(),
                        have.display(),
                        want.display()
                    );
                }
            }
            l
        }
        None => {
            let dir = path.parent().filter(|d| !d.as_os_str().is_empty()).unwrap_or(Path::new("."));
            if !dir.is_dir() {
                bail!("cannot make the ledger {}: the folder {} does not exist; create it first", path.display(), dir.display());
            }
            if let Some(r) = p.root.as_ref().filter(|r| !r.is_dir()) {
                bail!("--root {}: there is no such folder", r.display());
            }
            Ledger::new(&path, p.root.as_deref())?
        }
    };
    Ok((path, ledger))
}

fn absolute(p: &Path) -> Result<PathBuf> {
    Ok(p.canonicalize().or_else(|_| std::path::absolute(p)).with_context(|| format!("cannot resolve {}", p.display()))?)
}

/// The key of an image that must exist in the ledger's root.
fn existing_image(ledger: &Ledger, image: &Path) -> Result<String> {
    // A missing file is said to be missing, before the question of which folder it is in.
    if !image.exists() && !ledger.root_dir().join(image).exists() {
        bail!(
            "image {} not found: it does not exist (looked for it from the current folder and in the ledger's root {}); check the path",
            image.display(),
            ledger.root_dir().display()
        );
    }
    let key = ledger.key_for(image)?;
    let at = ledger.image_path(&key);
    if !at.is_file() {
        bail!(
            "image {} not found (looked for {}); check the path: it may be absolute, relative to the current \
             folder, or relative to the ledger's root {}",
            image.display(),
            at.display(),
            ledger.root_dir().display()
        );
    }
    Ok(key)
}

/// Commits changes durably; on failure says plainly that nothing was saved.
fn commit<T>(path: &Path, root: Option<&Path>, what: &str, f: impl FnOnce(&mut Ledger) -> T) -> Result<(Ledger, T)> {
    ledger::commit(path, root, &mut DiskWriter, f)
        .map_err(|e| anyhow::anyhow!("{e} The {what} was NOT saved; the ledger on disk is as it was."))
}

/// `ledger set`: returns the line to tell once the change is on disk.
pub fn set_verdict(a: &SetArgs) -> Result<String> {
    let (path, ledger) = for_change(&a.ledger)?;
    let key = existing_image(&ledger, &a.image)?;
    let at = Stamp::now();
    let mut changes = Vec::new();
    if let Some(VerdictArg(v)) = a.verdict {
        changes.push(Change { image: key.clone(), at, edit: Edit::Verdict(v) });
    }
    if let Some(n) = &a.note {
        changes.push(Change { image: key.clone(), at, edit: Edit::Note(n.clone()) });
    }
    for c in &changes {
        c.check()?;
    }
    let what = if a.verdict.is_some() { "verdict" } else { "note" };
    let (saved, ()) = commit(&path, a.ledger.root.as_deref(), what, |l| changes.iter().for_each(|c| l.apply(c)))?;
    let verdict = saved.verdict(&key).map_or("no verdict", Verdict::name);
    Ok(format!("{key}: {verdict} (saved in {})", path.display()))
}

fn show(a: &ShowArgs) -> Result<()> {
    let path = Ledger::file_for(&a.ledger);
    let ledger = Ledger::open(&path)?;
    if let Some(image) = &a.image {
        let key = ledger.key_for(image)?;
        let Some(e) = ledger.entry(&key) else {
            bail!("the ledger {} has nothing on {key}", path.display());
        };
        if a.json {
            println!("{}", serde_json::to_string_pretty(&serde_json::json!({ "image": key, "entry": e }))?);
            return Ok(());
        }
        println!("image    {key}");
        println!("verdict  {}", e.verdict.map_or("none", Verdict::name));
        println!("changed  {}", e.changed);
        if let Some([w, h]) = e.image_size {
            println!("drawn on a {w}×{h} image");
        }
        for d in &e.drawn {
            println!("drawn    {}", describe(d));
        }
        if !e.note.is_empty() {
            println!("note     {}", e.note.replace('\n', "\n         "));
        }
        return Ok(());
    }
    if a.json {
        print!("{}", ledger.to_json()?);
        return Ok(());
    }
    let wk = ledger.entries().map(|(k, _)| k.chars().count()).max().unwrap_or(5).max(5);
    println!("{:<wk$}  {:<8}  {:>5}  {:<24}  note", "image", "verdict", "drawn", "changed");
    for (k, e) in ledger.entries() {
        let note: String = e.note.lines().next().unwrap_or("").chars().take(60).collect();
        let more = if note.chars().count() < e.note.chars().count() { "…" } else { "" };
        println!("{k:<wk$}  {:<8}  {:>5}  {:<24}  {note}{more}", e.verdict.map_or("-", Verdict::name), e.drawn.len(), e.changed.to_string());
    }
    let c = ledger.counts();
    println!(
        "{}: {} clean, {} marked, {} unsure, {} exclude, {} without a verdict; {} with drawn regions (root {})",
        count(c.images, "image"), c.clean, c.marked, c.unsure, c.exclude, c.no_verdict, c.with_drawn_regions, ledger.root_dir().display()
    );
    Ok(())
}

fn describe(d: &DrawnShape) -> String {
    let label = if d.label.is_empty() { String::new() } else { format!("\"{}\" ", d.label) };
    match &d.shape {
        Shape::Rect { bbox } => format!("{label}box {:?}", bbox),
        Shape::Polygon { points } => format!("{label}polygon of {} points {:?}", points.len(), points),
    }
}

fn export(a: &ExportArgs) -> Result<()> {
    let path = Ledger::file_for(&a.ledger);
    let ledger = Ledger::open(&path)?;
    let mut bytes = Vec::new();
    ledger::write_csv(&ledger, &mut bytes)?;
    if a.csv.as_os_str() == "-" {
        use std::io::Write;
        std::io::stdout().write_all(&bytes)?;
        return Ok(());
    }
    ledger::write_durably(&a.csv, &bytes).with_context(|| format!("cannot write the CSV {}", a.csv.display()))?;
    eprintln!("wrote {} of {} to {}", count(ledger.len(), "image"), path.display(), a.csv.display());
    Ok(())
}

fn import(a: &ImportArgs) -> Result<()> {
    let rows = ledger::read_csv(&a.csv)?;
    let (path, _) = for_change(&a.ledger)?;
    let prefer = Prefer::parse(&a.prefer)?;
    let (saved, r) = commit(&path, a.ledger.root.as_deref(), "import", |l| ledger::import_rows(l, &rows, prefer, Stamp::now()))?;
    println!(
        "imported {} of {} into {}: {} added, {} replaced, {} removed, {} unchanged, {} kept as the ledger had them",
        count(rows.len(), "row"),
        a.csv.display(),
        path.display(),
        r.added.len(),
        r.replaced.len(),
        r.removed.len(),
        r.unchanged,
        r.kept.len()
    );
    if !r.kept.is_empty() {
        println!(
            "kept (the ledger's entry {}): {}{}",
            if prefer == Prefer::Ledger { "is preferred" } else { "changed later" },
            list(&r.kept),
            if prefer == Prefer::Newer { "; --prefer csv takes the file's" } else { "" }
        );
    }
    let missing: Vec<String> = rows.iter().map(|r| r.image.clone()).filter(|k| !saved.image_path(k).is_file()).collect();
    if !missing.is_empty() {
        eprintln!("note: images of the CSV not found in {} ({}): {}", saved.root_dir().display(), missing.len(), list(&missing));
    }
    Ok(())
}

/// "1 image", "2 images".
fn count(n: usize, what: &str) -> String {
    if n == 1 { format!("1 {what}") } else { format!("{n} {what}s") }
}

/// Up to five names, then how many more.
fn list(names: &[String]) -> String {
    let mut s = names.iter().take(5).cloned().collect::<Vec<_>>().join(", ");
    if names.len() > 5 {
        s.push_str(&format!(" and {} more", names.len() - 5));
    }
    s
}

/// Numbers separated by commas.
fn numbers(text: &str, flag: &str) -> Result<Vec<f64>> {
    text.split(',')
        .map(|t| t.trim().parse::<f64>().ok().filter(|v| v.is_finite()))
        .collect::<Option<Vec<_>>>()
        .with_context(|| format!("{flag} {text}: give numbers separated by commas"))
}

fn draw(a: &DrawArgs) -> Result<()> {
    let (path, ledger) = for_change(&a.ledger)?;
    let key = existing_image(&ledger, &a.image)?;
    if let Some(to) = &a.to {
        let e = ledger.entry(&key).filter(|e| !e.drawn.is_empty());
        let Some(e) = e else { bail!("the ledger {} has no drawn region on {key}", path.display()) };
        save_drawn(to, &DrawnFile::new(e.image_size, e.drawn.clone()))?;
        eprintln!("wrote {} of {key} to {}", count(e.drawn.len(), "drawn region"), to.display());
        return Ok(());
    }
    let at = Stamp::now();
    let edit = if a.clear {
        Edit::SetDrawn { shapes: Vec::new(), image_size: None }
    } else {
        let picture = crate::feed::Picture::open(&ledger.image_path(&key))?;
        let (h, w) = (picture.height(), picture.width());
        if let Some(e) = ledger.entry(&key)
            && let Some([ew, eh]) = e.image_size.filter(|s| !e.drawn.is_empty() && *s != [w, h])
        {
            bail!(
                "the {} drawn regions of {key} were drawn on a {ew}×{eh} image but the image is now {w}×{h}; \
                 clear them first (--clear) and draw again",
                e.drawn.len()
            );
        }
        let shapes = match (&a.bbox, &a.polygon, &a.from) {
            (Some(b), _, _) => {
                let v = numbers(b, "--box")?;
                let bbox: [f64; 4] = v.try_into().map_err(|_| anyhow::anyhow!("--box {b}: give four numbers x0,y0,x1,y1"))?;
                vec![DrawnShape { label: a.label.clone(), shape: Shape::Rect { bbox } }]
            }
            (_, Some(p), _) => {
                let v = numbers(p, "--polygon")?;
                if v.len() % 2 != 0 || v.len() < 6 {
                    bail!("--polygon {p}: give three points or more as x,y pairs");
                }
                vec![DrawnShape { label: a.label.clone(), shape: Shape::Polygon { points: v.chunks(2).map(|c| [c[0], c[1]]).collect() } }]
            }
            (_, _, Some(f)) => {
                let file = load_drawn(f)?;
                file.to_regions(h, w).with_context(|| format!("{} on image {key}", f.display()))?;
                file.regions
            }
            _ => unreachable!("clap requires one of --box, --polygon, --clear, --from, --to"),
        };
        for s in &shapes {
            drawn_region(s, h, w).with_context(|| format!("{} on image {key}", describe(s)))?;
        }
        Edit::AddDrawn { shapes, image_size: Some([w, h]) }
    };
    let change = Change { image: key.clone(), at, edit };
    change.check()?;
    let (saved, ()) = commit(&path, a.ledger.root.as_deref(), "drawing", |l| l.apply(&change))?;
    let n = saved.entry(&key).map_or(0, |e| e.drawn.len());
    println!("{key}: {} (saved in {})", count(n, "drawn region"), path.display());
    Ok(())
}

fn accept_cluster(a: &AcceptClusterArgs) -> Result<()> {
    let file = crate::sweep::GroupsFile::read(&a.sweep)?;
    let Some(cluster) = file.recurring_hotspots.iter().find(|c| c.id == a.cluster) else {
        bail!(
            "{} lists {} recurring hotspot(s){}; there is no cluster {}",
            a.sweep.join("groups.json").display(),
            file.recurring_hotspots.len(),
            if file.recurring_hotspots.is_empty() { String::new() } else { format!(" (1 to {})", file.recurring_hotspots.len()) },
            a.cluster
        );
    };
    let root = crate::report::sweep::read(&a.sweep)?.images_root;
    let (path, ledger) = for_change(&a.ledger)?;
    let (changes, outside) = crate::sweep::accept_cluster(&ledger, cluster, &root);
    if !outside.is_empty() && outside.len() == cluster.images {
        bail!(
            "none of the cluster's {} images lies under the ledger's root {} (the sweep read {}): use a ledger in or above the \
             images folder",
            cluster.images,
            ledger.root_dir().display(),
            root.display()
        );
    }
    for c in &changes {
        c.check()?;
    }
    // The changes are made again on the ledger as the lock finds it, so a writer in between
    // loses nothing and an image accepted twice gets its box once.
    let (saved, changed) = commit(&path, a.ledger.root.as_deref(), "acceptance", |l| {
        let (changes, _) = crate::sweep::accept_cluster(l, cluster, &root);
        changes.iter().for_each(|c| l.apply(c));
        changes.len()
    })?;
    let keys: std::collections::BTreeSet<String> = cluster.members.iter().filter_map(|m| saved.key_for(&root.join(&m.path)).ok()).collect();
    let marked = keys.iter().filter(|k| saved.verdict(k) == Some(Verdict::Marked)).count();
    println!(
        "recurring hotspot {}: {marked} image(s) marked with its box drawn ({changed} change(s)){} (saved in {})",
        cluster.id,
        if outside.is_empty() { String::new() } else { format!("; {} image(s) outside the ledger's root left alone", outside.len()) },
        path.display()
    );
    Ok(())
}
