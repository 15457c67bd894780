//! `spurion regions --image I [--out DIR]`: the regions of one image, found without any model.

use std::path::Path;

use anyhow::Result;

use crate::regions::{FinderSettings, find_regions_in, regions_file, write_regions};

/// With `out`, writes `DIR/region-NN-KIND.png` masks (white = region) and `DIR/regions.json`
/// and prints one line per region; without it, prints the JSON to standard output and writes
/// nothing.
pub fn run(image: &Path, out: Option<&Path>, settings: &FinderSettings) -> Result<()> {
    match out {
        Some(dir) => {
            let file = write_regions(image, dir, settings)?;
            if file.regions.is_empty() {
                println!("{}: no regions found", image.display());
            }
            for f in &file.regions {
                println!(
                    "{}  box {:?}  area {:.2}%  confidence {:.2}  {}",
                    f.label,
                    f.bbox,
                    100.0 * f.area_fraction,
                    f.confidence,
                    f.reason
                );
            }
            println!("wrote {}", dir.join("regions.json").display());
        }
        None => {
            let picture = crate::feed::Picture::open(image)?;
            let luma = picture.luminance();
            let regions = find_regions_in(&picture.pixels, settings);
            println!("{}", serde_json::to_string_pretty(&regions_file(image, &luma, &regions, settings))?);
        }
    }
    Ok(())
}
