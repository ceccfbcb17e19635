//! The catalogue of published spectral indices.
//!
//! Each [`SpectralIndex`] holds its formula with the published coefficients, the paper it
//! comes from and the roles it needs (see `docs/methods.md`, "Spectral indices"). Inputs are
//! reflectance (0–1). Arithmetic is done in f64 per cell and rounded once to f32. A cell
//! whose inputs include NaN, or whose result is not finite (a zero denominator, the square
//! root of a negative number), is NaN: an index never yields ±inf.

use ndarray::{Array2, Zip};

use crate::error::{Error, Result};
use crate::spectral::roles::{BandArrays, Role};

/// One published spectral index.
#[derive(Debug)]
pub struct SpectralIndex {
    /// Lower-case name, also the stack's `feature` value.
    pub name: &'static str,
    /// The formula as terrastack computes it (B, G, R, RE, N for the reflectances).
    pub formula: &'static str,
    /// The publication the formula and its coefficients come from.
    pub reference: &'static str,
    /// Roles the formula reads, in the order `cell` receives them.
    pub roles: &'static [Role],
    /// The values the index can take, from its definition: the range of the formula over
    /// reflectances in [0, 1] (derived from the formula; a test checks it on a lattice of
    /// the unit cube), ±inf for an unbounded side. Two formulas are unbounded on the cube
    /// because their denominator can vanish: EVI takes the valid range of the MODIS EVI
    /// product, [−1, 1] (Huete et al. 2002; from memory); VARI has no published range
    /// and is left unbounded. Cells outside are counted per band in `stack.json`.
    pub valid_range: (f64, f64),
    /// The formula on one cell's reflectances (in `roles` order).
    cell: fn(&[f64]) -> f64,
}

const B: Role = Role::Blue;
const G: Role = Role::Green;
const R: Role = Role::Red;
const RE: Role = Role::RedEdge;
const N: Role = Role::Nir;

/// SAVI's soil-brightness factor L (Huete 1988 recommends 0.5 for intermediate cover).
pub const SAVI_L: f64 = 0.5;
/// OSAVI's fixed soil factor (Rondeaux, Steven & Baret 1996).
pub const OSAVI_X: f64 = 0.16;
/// EVI coefficients G, C1, C2, L (Huete et al. 2002, MODIS).
pub const EVI_COEFFS: (f64, f64, f64, f64) = (2.5, 6.0, 7.5, 1.0);
/// EVI2 coefficients G, C, L (Jiang et al. 2008).
pub const EVI2_COEFFS: (f64, f64, f64) = (2.5, 2.4, 1.0);

fn nd(a: f64, b: f64) -> f64 {
    (a - b) / (a + b)
}

static CATALOGUE: [SpectralIndex; 13] = [
    SpectralIndex {
        name: "ndvi",
        formula: "(N − R) / (N + R)",
        reference: "Rouse, Haas, Schell & Deering 1974, Monitoring vegetation systems in the Great Plains with ERTS, NASA SP-351",
        roles: &[N, R],
        valid_range: (-1.0, 1.0),
        cell: |v| nd(v[0], v[1]),
    },
    SpectralIndex {
        name: "gndvi",
        formula: "(N − G) / (N + G)",
        reference: "Gitelson, Kaufman & Merzlyak 1996, Remote Sensing of Environment 58(3)",
        roles: &[N, G],
        valid_range: (-1.0, 1.0),
        cell: |v| nd(v[0], v[1]),
    },
    SpectralIndex {
        name: "ndre",
        formula: "(N − RE) / (N + RE)",
        reference: "Barnes et al. 2000, Proc. 5th Int. Conf. on Precision Agriculture",
        roles: &[N, RE],
        valid_range: (-1.0, 1.0),
        cell: |v| nd(v[0], v[1]),
    },
    SpectralIndex {
        name: "savi",
        formula: "(1 + L)(N − R) / (N + R + L), L = 0.5",
        reference: "Huete 1988, Remote Sensing of Environment 25(3)",
        roles: &[N, R],
        valid_range: (-1.0, 1.0), // (1 + L)·(±1)/(1 + L) at N, R = 1, 0 and 0, 1
        cell: |v| (1.0 + SAVI_L) * (v[0] - v[1]) / (v[0] + v[1] + SAVI_L),
    },
    SpectralIndex {
        name: "osavi",
        formula: "(N − R) / (N + R + 0.16)",
        reference: "Rondeaux, Steven & Baret 1996, Remote Sensing of Environment 55(2)",
        roles: &[N, R],
        valid_range: (-1.0 / (1.0 + OSAVI_X), 1.0 / (1.0 + OSAVI_X)), // ±1/(1 + 0.16) at N, R = 1, 0 and 0, 1
        cell: |v| (v[0] - v[1]) / (v[0] + v[1] + OSAVI_X),
    },
    SpectralIndex {
        name: "msavi2",
        formula: "(2N + 1 − √((2N + 1)² − 8(N − R))) / 2",
        reference: "Qi, Chehbouni, Huete, Kerr & Sorooshian 1994, Remote Sensing of Environment 48(2)",
        roles: &[N, R],
        valid_range: (-1.0, 1.0), // (3 − 1)/2 = 1 at N = 1, R = 0; (1 − 3)/2 = −1 at N = 0, R = 1
        cell: |v| {
            let a = 2.0 * v[0] + 1.0;
            (a - (a * a - 8.0 * (v[0] - v[1])).sqrt()) / 2.0
        },
    },
    SpectralIndex {
        name: "evi",
        formula: "2.5(N − R) / (N + 6R − 7.5B + 1)",
        reference: "Huete, Didan, Miura, Rodriguez, Gao & Ferreira 2002, Remote Sensing of Environment 83(1-2)",
        roles: &[N, R, B],
        valid_range: (-1.0, 1.0), // MODIS EVI valid range (from memory): the formula is unbounded
        cell: |v| {
            let (g, c1, c2, l) = EVI_COEFFS;
            g * (v[0] - v[1]) / (v[0] + c1 * v[1] - c2 * v[2] + l)
        },
    },
    SpectralIndex {
        name: "evi2",
        formula: "2.5(N − R) / (N + 2.4R + 1)",
        reference: "Jiang, Huete, Didan & Miura 2008, Remote Sensing of Environment 112(10)",
        roles: &[N, R],
        valid_range: (-2.5 / 3.4, 1.25), // 2.5·1/(1 + 1) at N = 1, R = 0; −2.5/(2.4 + 1) at N = 0, R = 1
        cell: |v| {
            let (g, c, l) = EVI2_COEFFS;
            g * (v[0] - v[1]) / (v[0] + c * v[1] + l)
        },
    },
    SpectralIndex {
        name: "ndwi",
        formula: "(G − N) / (G + N)",
        reference: "McFeeters 1996, International Journal of Remote Sensing 17(7)",
        roles: &[G, N],
        valid_range: (-1.0, 1.0),
        cell: |v| nd(v[0], v[1]),
    },
    SpectralIndex {
        name: "cire",
        formula: "N / RE − 1",
        reference: "Gitelson, Gritz & Merzlyak 2003, Journal of Plant Physiology 160(3); Gitelson et al. 2005, Geophysical Research Letters 32",
        roles: &[N, RE],
        valid_range: (-1.0, f64::INFINITY), // N = 0 gives −1; RE → 0 is unbounded
        cell: |v| v[0] / v[1] - 1.0,
    },
    SpectralIndex {
        name: "cigreen",
        formula: "N / G − 1",
        reference: "Gitelson, Gritz & Merzlyak 2003, Journal of Plant Physiology 160(3); Gitelson et al. 2005, Geophysical Research Letters 32",
        roles: &[N, G],
        valid_range: (-1.0, f64::INFINITY), // N = 0 gives −1; G → 0 is unbounded
        cell: |v| v[0] / v[1] - 1.0,
    },
    SpectralIndex {
        name: "exg",
        formula: "2g − r − b with g = G/(R+G+B), r = R/(R+G+B), b = B/(R+G+B)",
        reference: "Woebbecke, Meyer, Von Bargen & Mortensen 1995, Transactions of the ASAE 38(1)",
        roles: &[R, G, B],
        valid_range: (-1.0, 2.0), // 3g − 1 with g ∈ [0, 1]
        cell: |v| {
            let sum = v[0] + v[1] + v[2];
            (2.0 * v[1] - v[0] - v[2]) / sum
        },
    },
    SpectralIndex {
        name: "vari",
        formula: "(G − R) / (G + R − B)",
        reference: "Gitelson, Kaufman, Stark & Rundquist 2002, Remote Sensing of Environment 80(1)",
        roles: &[G, R, B],
        valid_range: (f64::NEG_INFINITY, f64::INFINITY), // no published range; the formula is unbounded
        cell: |v| (v[0] - v[1]) / (v[0] + v[1] - v[2]),
    },
];

/// Every index terrastack knows, in a fixed order.
pub fn catalogue() -> &'static [SpectralIndex] {
    &CATALOGUE
}

/// The index called `name` (case-insensitive); the error lists the valid names.
pub fn find_index(name: &str) -> Result<&'static SpectralIndex> {
    let wanted = name.trim().to_ascii_lowercase();
    CATALOGUE.iter().find(|i| i.name == wanted).ok_or_else(|| {
        let names: Vec<&str> = CATALOGUE.iter().map(|i| i.name).collect();
        Error::usage(format!("unknown spectral index `{name}`"))
            .with_fix(format!("choose one of: {}", names.join(", ")))
    })
}

impl SpectralIndex {
    /// The roles this index reads.
    pub fn required_roles(&self) -> Vec<Role> {
        self.roles.to_vec()
    }

    /// The index on one cell (reflectances in `roles` order); NaN when undefined.
    pub fn value(&self, reflectance: &[f64]) -> f64 {
        if reflectance.len() != self.roles.len() || reflectance.iter().any(|v| v.is_nan()) {
            return f64::NAN;
        }
        let v = (self.cell)(reflectance);
        if v.is_finite() {
            v
        } else {
            f64::NAN
        }
    }

    /// The index over a block. Unitless; NaN where any input is NaN or the result is
    /// undefined. Refuses with an error naming the role when a band is missing.
    pub fn compute(&self, bands: &BandArrays) -> Result<Array2<f32>> {
        let what = format!("index {}", self.name);
        let arrays = self
            .roles
            .iter()
            .map(|r| bands.require(r, &what))
            .collect::<Result<Vec<_>>>()?;
        let mut out = Array2::<f32>::zeros(arrays[0].dim());
        let f = |o: &mut f32, vals: &[f32]| {
            let mut buf = [0.0f64; 3];
            for (b, v) in buf.iter_mut().zip(vals) {
                *b = *v as f64;
            }
            *o = self.value(&buf[..vals.len()]) as f32;
        };
        match arrays.as_slice() {
            [a, b] => Zip::from(&mut out)
                .and(*a)
                .and(*b)
                .par_for_each(|o, &x, &y| f(o, &[x, y])),
            [a, b, c] => Zip::from(&mut out)
                .and(*a)
                .and(*b)
                .and(*c)
                .par_for_each(|o, &x, &y, &z| f(o, &[x, y, z])),
            _ => {
                return Err(Error::usage(format!(
                    "index {} reads {} bands, which this build cannot evaluate",
                    self.name,
                    arrays.len()
                )))
            }
        }
        Ok(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn worked_bands() -> BandArrays {
        // docs/methods.md, "Spectral indices": B = 0.04, G = 0.08, R = 0.05, RE = 0.20, N = 0.40.
        let mut b = BandArrays::new();
        for (role, v) in [(B, 0.04f32), (G, 0.08), (R, 0.05), (RE, 0.20), (N, 0.40)] {
            b.insert(role, Array2::from_elem((2, 3), v)).unwrap();
        }
        b
    }

    #[test]
    fn worked_values_from_methods_sheet() {
        // Worked values in docs/methods.md ("Worked with B = 0.04 …"), 4 decimals, so ±5e-5.
        let expected = [
            ("ndvi", 0.7778),
            ("gndvi", 0.6667),
            ("ndre", 0.3333),
            ("savi", 0.5526),
            ("osavi", 0.5738),
            ("msavi2", 0.5683),
            ("evi", 0.6250),
            ("evi2", 0.5757),
            ("ndwi", -0.6667),
            ("cire", 1.0000),
            ("cigreen", 4.0000),
            ("exg", 0.4118),
            ("vari", 0.3333),
        ];
        assert_eq!(expected.len(), catalogue().len());
        let bands = worked_bands();
        for (name, want) in expected {
            let out = find_index(name).unwrap().compute(&bands).unwrap();
            for v in out.iter() {
                assert!(
                    (*v as f64 - want).abs() < 5e-5 + 1e-6,
                    "{name}: {v} vs {want}"
                );
            }
        }
    }

    #[test]
    fn exact_fractions_by_hand() {
        // Worked by hand from the formulas: ndvi = 0.35/0.45 = 7/9; exg = 0.07/0.17 = 7/17;
        // evi = 0.875/1.4 = 0.625; msavi2 = (1.8 − √0.44)/2.
        let b = worked_bands();
        let v = |n: &str| find_index(n).unwrap().compute(&b).unwrap()[[0, 0]] as f64;
        assert!((v("ndvi") - 7.0 / 9.0).abs() < 1e-6);
        assert!((v("exg") - 7.0 / 17.0).abs() < 1e-6);
        assert!((v("evi") - 0.625).abs() < 1e-6);
        assert!((v("msavi2") - (1.8 - 0.44f64.sqrt()) / 2.0).abs() < 1e-6);
    }

    #[test]
    fn division_by_zero_is_nan_never_inf() {
        let mut b = BandArrays::new();
        b.insert(N, array![[0.0f32, 0.3, f32::NAN]]).unwrap();
        b.insert(R, array![[0.0f32, 0.0, f32::NAN]]).unwrap();
        b.insert(G, array![[0.0f32, 0.0, 0.1]]).unwrap();
        b.insert(RE, array![[0.0f32, 0.0, 0.1]]).unwrap();
        b.insert(B, array![[0.0f32, 0.0, 0.1]]).unwrap();
        for index in catalogue() {
            let out = index.compute(&b).unwrap();
            assert!(
                out.iter().all(|v| !v.is_infinite()),
                "{} gave inf",
                index.name
            );
            assert!(
                out[[0, 2]].is_nan(),
                "{}: NaN input must give NaN",
                index.name
            );
        }
        // 0.3/0 − 1 would be +inf: NaN instead.
        assert!(find_index("cire").unwrap().compute(&b).unwrap()[[0, 1]].is_nan());
        // ndvi of N = 0.3, R = 0 is exactly 1 (defined).
        assert_eq!(
            find_index("ndvi").unwrap().compute(&b).unwrap()[[0, 1]],
            1.0
        );
    }

    #[test]
    fn missing_role_is_named() {
        let mut b = BandArrays::new();
        b.insert(N, array![[0.4f32]]).unwrap();
        b.insert(R, array![[0.05f32]]).unwrap();
        let e = find_index("ndre")
            .unwrap()
            .compute(&b)
            .unwrap_err()
            .to_string();
        assert!(e.contains("`rededge`") && e.contains("index ndre"), "{e}");
        assert_eq!(find_index("NDRE").unwrap().required_roles(), vec![N, RE]);
    }

    #[test]
    fn unknown_index_lists_names() {
        let e = find_index("ndxi").unwrap_err().to_string();
        assert!(
            e.contains("ndvi") && e.contains("vari") && e.contains("`ndxi`"),
            "{e}"
        );
    }

    #[test]
    fn valid_ranges_bound_the_formulas_on_the_unit_cube() {
        // Every index on a lattice of reflectances 0, 0.05, …, 1 (the unit cube of its
        // roles): inside its valid range, and each finite end reached (the ranges are
        // derived from the formulas, see `valid_range`). EVI and VARI are unbounded there.
        let steps: Vec<f64> = (0..=20).map(|i| i as f64 * 0.05).collect();
        for index in catalogue() {
            if matches!(index.name, "evi" | "vari") {
                continue;
            }
            let (lo, hi) = index.valid_range;
            let (mut min, mut max) = (f64::INFINITY, f64::NEG_INFINITY);
            let n = index.roles.len();
            let mut point = vec![0usize; n];
            loop {
                let v: Vec<f64> = point.iter().map(|&i| steps[i]).collect();
                let x = index.value(&v);
                if x.is_finite() {
                    min = min.min(x);
                    max = max.max(x);
                }
                let mut k = 0;
                while k < n && point[k] == steps.len() - 1 {
                    point[k] = 0;
                    k += 1;
                }
                if k == n {
                    break;
                }
                point[k] += 1;
            }
            assert!(
                min >= lo - 1e-12 && max <= hi + 1e-12,
                "{}: {min}..{max}",
                index.name
            );
            assert!(
                (min - lo).abs() < 1e-12,
                "{}: min {min} vs {lo}",
                index.name
            );
            if hi.is_finite() {
                assert!(
                    (max - hi).abs() < 1e-12,
                    "{}: max {max} vs {hi}",
                    index.name
                );
            }
        }
        // The cases lie outside: SAVI 1.19 and EVI2 1.74 (unscaled reflectance).
        assert!(find_index("savi").unwrap().valid_range.1 < 1.19);
        assert!(find_index("evi2").unwrap().valid_range.1 < 1.74);
    }

    #[test]
    fn catalogue_names_unique_and_documented() {
        let mut names: Vec<&str> = catalogue().iter().map(|i| i.name).collect();
        names.sort();
        names.dedup();
        assert_eq!(names.len(), 13);
        assert!(catalogue()
            .iter()
            .all(|i| !i.reference.is_empty() && !i.formula.is_empty()));
    }
}
