//! `terrastack features`: the catalogue of every feature a stack can hold — the word to
//! ask for it, units, method, formula and published reference. `--json` for scripts.

use serde_json::json;
use terrastack::{spectral, terrain, Result};

#[derive(clap::Args)]
pub struct Args {
    /// Print the catalogue as JSON.
    #[arg(long)]
    pub json: bool,
}

pub fn run(args: Args) -> Result<()> {
    let terrain_docs = terrain::catalogue();
    let indices = spectral::catalogue();
    if args.json {
        let mut rows: Vec<serde_json::Value> = terrain_docs
            .iter()
            .map(|d| {
                json!({ "word": d.word, "feature": d.feature, "kind": "terrain", "units": d.units,
                        "method": d.method, "formula": d.formula, "reference": d.reference,
                        "edges": d.edges })
            })
            .collect();
        rows.extend(terrastack::ground::bands::catalogue().iter().map(|d| {
            json!({ "word": d.word, "feature": d.feature, "kind": "ground", "units": d.units,
                    "method": d.method, "formula": d.formula, "reference": d.reference,
                    "edges": d.edges })
        }));
        rows.extend(terrastack::texture::bands::TEXTURE_WORDS.iter().map(|d| {
            json!({ "word": d.word, "feature": d.word.split('@').next().unwrap_or(""),
                    "kind": "texture", "units": d.units, "method": "", "formula": d.summary,
                    "reference": if d.word.starts_with("glcm") {
                        terrastack::texture::bands::GLCM_REFERENCE } else { "" } })
        }));
        rows.push(json!({ "word": "reflectance", "feature": "reflectance", "kind": "spectral",
            "units": "unitless", "method": "", "formula": "stored · scale + offset, per mapped band",
            "reference": "" }));
        rows.extend(indices.iter().map(|i| {
            json!({ "word": i.name, "feature": i.name, "kind": "spectral", "units": "unitless",
                    "method": "", "formula": i.formula, "reference": i.reference })
        }));
        println!(
            "{}",
            serde_json::to_string_pretty(&rows).expect("catalogue serialises")
        );
        return Ok(());
    }
    println!("Terrain features (windowed ones are built at every --scales radius, in metres;");
    println!(
        "a radius must span at least {} cells of the grid on both axes):",
        terrain::MIN_RADIUS_CELLS
    );
    println!();
    for d in &terrain_docs {
        println!("  {:<24} {:<9} {}", d.word, d.units, d.method);
        println!("  {:<24} {}", "", d.formula);
        println!("  {:<24} {}", "", d.reference);
        println!("  {:<24} edges and holes: {}", "", d.edges);
        println!();
    }
    println!(
        "Ground and height (the ground filter's settings: --ground-* flags, [ground] in a recipe):"
    );
    println!();
    for d in terrastack::ground::bands::catalogue() {
        println!("  {:<24} {:<9} {}", d.word, d.units, d.method);
        println!("  {:<24} {}", "", d.formula);
        println!("  {:<24} {}", "", d.reference);
        println!("  {:<24} edges and holes: {}", "", d.edges);
        println!();
    }
    println!(
        "Texture of a band, index or band-math expression SOURCE (R: radius in metres; without @R, every --scales radius;"
    );
    println!("grey levels, pair distance and ranges: --texture-* flags, [texture] in a recipe):");
    println!();
    for d in terrastack::texture::bands::TEXTURE_WORDS {
        println!("  {:<26} {:<13} {}", d.word, d.units, d.summary);
    }
    println!(
        "  {:<26} {}",
        "",
        terrastack::texture::bands::GLCM_REFERENCE
    );
    println!();
    println!("Spectral features (reflectance 0–1; `indices` asks for every index the mapped bands allow):");
    println!();
    println!(
        "  {:<24} {:<9} one band per mapped role: stored · scale + offset",
        "reflectance", "unitless"
    );
    println!();
    for i in indices {
        println!("  {:<24} {:<9} {}", i.name, "unitless", i.formula);
        println!("  {:<24} {}", "", i.reference);
        println!();
    }
    println!("Band math: --index NAME=EXPRESSION over role names; see the README.");
    Ok(())
}
