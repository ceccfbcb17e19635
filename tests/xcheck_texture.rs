//! Cross-check of the grey-level co-occurrence texture against scikit-image
//! (`graycomatrix` and `graycoprops`) on the same quantised windows.
//!
//! The references are written by `python3 scripts/xcheck_texture.py gen DIR`; run with
//! `TERRASTACK_XCHECK_DIR=DIR cargo test --release --test xcheck_texture -- --ignored`.
//! The test is ignored under plain `cargo test`; `scripts/ci/texture.sh` runs it.

use std::fs;
use std::path::PathBuf;

use ndarray::Array2;
use serde_json::Value;

use terrastack::texture::glcm::{glcm_features, GlcmWindow, Quantiser, FEATURE_NAMES};

fn xcheck_dir() -> PathBuf {
    match std::env::var_os("TERRASTACK_XCHECK_DIR") {
        Some(d) => PathBuf::from(d),
        None => panic!(
            "this cross-check needs TERRASTACK_XCHECK_DIR: a folder made by \
             `python3 scripts/xcheck_texture.py gen DIR`"
        ),
    }
}

fn read_bytes(name: &str) -> Vec<u8> {
    let p = xcheck_dir().join(name);
    fs::read(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

fn num(v: &Value) -> f64 {
    v.as_f64().expect("number")
}

#[test]
#[ignore = "needs references from scripts/xcheck_texture.py (run by scripts/ci/texture.sh)"]
fn glcm_features_equal_scikit_image() {
    let manifest: Value =
        serde_json::from_slice(&read_bytes("manifest.json")).expect("manifest.json is JSON");
    let (h, w) = (
        num(&manifest["rows"]) as usize,
        num(&manifest["cols"]) as usize,
    );
    let image: Vec<f32> = read_bytes("image.f32")
        .chunks_exact(4)
        .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
        .collect();
    let image = Array2::from_shape_vec((h, w), image).expect("image shape");
    for case in manifest["cases"].as_array().expect("cases") {
        let name = case["name"].as_str().expect("name");
        let n = num(&case["levels"]) as usize;
        let q = Quantiser::new(num(&case["lo"]), num(&case["hi"]), n).unwrap();
        let levels = q.quantise(image.view());
        // The same levels as numpy's (nodata: terrastack's sentinel, numpy's level N).
        let want_levels: Vec<u16> = read_bytes(&format!("{name}.levels.u16"))
            .chunks_exact(2)
            .map(|b| u16::from_le_bytes([b[0], b[1]]))
            .collect();
        for (got, want) in levels.iter().zip(&want_levels) {
            let got = if *got == u16::MAX { n as u16 } else { *got };
            assert_eq!(got, *want, "{name}: quantised level");
        }
        let win = GlcmWindow {
            kx: num(&case["kx"]) as usize,
            ky: num(&case["ky"]) as usize,
            distance: num(&case["distance"]) as usize,
        };
        let got = glcm_features(levels.view(), n, win, 0..h, 0..w);
        let want: Vec<f64> = read_bytes(&format!("{name}.features.f64"))
            .chunks_exact(8)
            .map(|b| f64::from_le_bytes(b.try_into().unwrap()))
            .collect();
        for (k, feature) in FEATURE_NAMES.iter().enumerate() {
            let mut worst = 0.0f64;
            for r in 0..h {
                for c in 0..w {
                    let (g, x) = (got[k][[r, c]], want[(k * h + r) * w + c]);
                    assert_eq!(
                        g.is_nan(),
                        x.is_nan(),
                        "{name} {feature} ({r}, {c}): {g} vs {x}"
                    );
                    if !x.is_nan() {
                        worst = worst.max((g - x).abs());
                    }
                }
            }
            // Both sides sum the same terms in another order: agreement to 1e-12.
            assert!(
                worst < 1e-12,
                "{name} {feature}: largest difference {worst:e}"
            );
            println!("{name} {feature}: equal to scikit-image within {worst:.1e}");
        }
    }
}
