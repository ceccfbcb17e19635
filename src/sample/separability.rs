//! Which bands of a training table separate its classes: per band the one-way ANOVA F
//! statistic with its p-value, the Jeffries–Matusita distance of every pair of classes
//! under a Gaussian model of each class, and groups of strongly correlated bands.
//!
//! Formulas and references: docs/methods.md, "Class separability". In short, for a band
//! with n valid rows in k classes (class c: n_c rows, mean m_c, unbiased variance s_c²):
//!
//! - F = [Σ n_c (m_c − m)² / (k − 1)] / [Σ Σ (x − m_c)² / (n − k)], with p = P(F(k − 1,
//!   n − k) ≥ F) from the regularised incomplete beta function (Fisher 1925; the same
//!   statistic as scikit-learn's `f_classif`).
//! - Bhattacharyya distance of two univariate Gaussians, B = (m₁ − m₂)² / (4 (s₁² + s₂²))
//!   plus ½ ln((s₁² + s₂²) / (2 s₁ s₂)), and JM = 2 (1 − e^(−B)), from 0 (same
//!   distribution) to 2 (no overlap) (Richards 2013).
//! - Pearson correlation of two bands over the rows valid in both; bands are grouped by
//!   single linkage: two bands share a group when a chain of pairs with |r| ≥ threshold
//!   joins them.
//!
//! Rows are the table's rows as they are: per-cell tables hold many rows per sample, which
//! are not independent, so their p-values are far too small to be read as tests; F and JM
//! still rank the bands. A value that cannot be computed (too few rows, a constant band)
//! is NaN in memory and `null` in the JSON.

use std::fmt;

use serde::Serialize;

/// Correlation above which bands are grouped when none is given: |r| ≥ 0.9 (common
/// practice for calling predictors redundant).
pub const DEFAULT_CORRELATION_THRESHOLD: f64 = 0.9;

/// The separability of one band.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BandSeparability {
    pub band: String,
    /// Rows with a value in this band.
    pub rows: usize,
    /// One-way ANOVA F statistic (NaN/null when fewer than 2 classes or no within-class
    /// degrees of freedom; infinite/null when every class is constant).
    pub anova_f: f64,
    /// Probability of an F at least this large if the classes had one mean.
    pub p_value: f64,
    /// Jeffries–Matusita distance per class pair, in the order of [`Separability::pairs`].
    pub jm: Vec<f64>,
}

/// Per class pair, the band that separates it best.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BestBand {
    pub classes: [String; 2],
    /// `None` when no band gives a JM for this pair.
    pub band: Option<String>,
    pub jm: f64,
}

/// Separability of a training table's classes.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Separability {
    pub format: &'static str,
    /// Table rows the figures come from.
    pub rows: usize,
    /// Class names in name order.
    pub classes: Vec<String>,
    /// Rows per class.
    pub rows_per_class: Vec<usize>,
    /// Class pairs (indices into `classes`, a < b), in the order of every `jm` list.
    pub pairs: Vec<[usize; 2]>,
    pub jm_model: &'static str,
    pub bands: Vec<BandSeparability>,
    pub best_band_per_pair: Vec<BestBand>,
    pub correlation_threshold: f64,
    /// Pearson correlation matrix, bands in table order.
    pub correlation: Vec<Vec<f64>>,
    /// Groups of two or more bands joined by |r| ≥ threshold (single linkage).
    pub correlated_groups: Vec<Vec<String>>,
}

/// Format tag of the JSON file.
pub const FORMAT: &str = "terrastack-separability/1";

/// Mean, unbiased variance and count of the finite values of `x`.
fn moments(x: impl Iterator<Item = f64> + Clone) -> (f64, f64, usize) {
    let (mut n, mut sum) = (0usize, 0.0);
    for v in x.clone() {
        n += 1;
        sum += v;
    }
    if n == 0 {
        return (f64::NAN, f64::NAN, 0);
    }
    let mean = sum / n as f64;
    let ss: f64 = x.map(|v| (v - mean) * (v - mean)).sum();
    let var = if n > 1 { ss / (n - 1) as f64 } else { f64::NAN };
    (mean, var, n)
}

/// One-way ANOVA F and its p-value over `values` with class indices `labels`
/// (non-finite values are skipped). Two passes in f64: class means first, then squares.
pub fn anova_f(values: &[f64], labels: &[usize], n_classes: usize) -> (f64, f64) {
    let mut count = vec![0usize; n_classes];
    let mut sum = vec![0.0f64; n_classes];
    for (&v, &c) in values.iter().zip(labels) {
        if v.is_finite() {
            count[c] += 1;
            sum[c] += v;
        }
    }
    let n: usize = count.iter().sum();
    let k = count.iter().filter(|&&c| c > 0).count();
    if k < 2 || n <= k {
        return (f64::NAN, f64::NAN);
    }
    let mean: Vec<f64> = (0..n_classes)
        .map(|c| {
            if count[c] > 0 {
                sum[c] / count[c] as f64
            } else {
                0.0
            }
        })
        .collect();
    let grand = sum.iter().sum::<f64>() / n as f64;
    let between: f64 = (0..n_classes)
        .map(|c| count[c] as f64 * (mean[c] - grand).powi(2))
        .sum();
    let within: f64 = values
        .iter()
        .zip(labels)
        .filter(|(v, _)| v.is_finite())
        .map(|(&v, &c)| (v - mean[c]).powi(2))
        .sum();
    let (d1, d2) = ((k - 1) as f64, (n - k) as f64);
    let f = (between / d1) / (within / d2);
    let p = if f.is_nan() {
        f64::NAN
    } else if f.is_infinite() {
        0.0
    } else {
        f_survival(f, d1, d2)
    };
    (f, p)
}

/// Jeffries–Matusita distance of two classes given (mean, unbiased variance) each,
/// under a univariate Gaussian model: JM = 2 (1 − e^(−B)) with B the Bhattacharyya
/// distance. Zero variances: equal point masses give 0, any other case 2.
pub fn jeffries_matusita(a: (f64, f64), b: (f64, f64)) -> f64 {
    let ((m1, v1), (m2, v2)) = (a, b);
    if !(m1.is_finite() && m2.is_finite() && v1.is_finite() && v2.is_finite()) {
        return f64::NAN;
    }
    if v1 == 0.0 || v2 == 0.0 {
        return if v1 == v2 && m1 == m2 { 0.0 } else { 2.0 };
    }
    let s = v1 + v2;
    let bhatta = (m1 - m2).powi(2) / (4.0 * s) + 0.5 * (s / (2.0 * (v1 * v2).sqrt())).ln();
    2.0 * (1.0 - (-bhatta).exp())
}

/// Pearson correlation of `a` and `b` over the indices where both are finite (two-pass);
/// NaN with fewer than 2 such rows or a constant band.
pub fn pearson(a: &[f64], b: &[f64]) -> f64 {
    let both = || {
        a.iter()
            .zip(b)
            .filter(|(x, y)| x.is_finite() && y.is_finite())
    };
    let n = both().count();
    if n < 2 {
        return f64::NAN;
    }
    let ma = both().map(|(x, _)| x).sum::<f64>() / n as f64;
    let mb = both().map(|(_, y)| y).sum::<f64>() / n as f64;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for (x, y) in both() {
        sab += (x - ma) * (y - mb);
        saa += (x - ma) * (x - ma);
        sbb += (y - mb) * (y - mb);
    }
    if saa == 0.0 || sbb == 0.0 {
        return f64::NAN;
    }
    (sab / (saa.sqrt() * sbb.sqrt())).clamp(-1.0, 1.0)
}

/// Groups (band indices, two or more, each in band order, ordered by first band) joined
/// by single linkage over |r| ≥ `threshold`.
pub fn correlated_groups(correlation: &[Vec<f64>], threshold: f64) -> Vec<Vec<usize>> {
    let n = correlation.len();
    let mut group: Vec<usize> = (0..n).collect();
    fn root(g: &mut [usize], mut i: usize) -> usize {
        while g[i] != i {
            g[i] = g[g[i]];
            i = g[i];
        }
        i
    }
    for (i, row) in correlation.iter().enumerate() {
        for (j, r) in row.iter().enumerate().skip(i + 1) {
            if r.abs() >= threshold {
                let (ri, rj) = (root(&mut group, i), root(&mut group, j));
                group[ri.max(rj)] = ri.min(rj);
            }
        }
    }
    let mut out: Vec<Vec<usize>> = Vec::new();
    for i in 0..n {
        let r = root(&mut group, i);
        match out.iter_mut().find(|g| g[0] == r) {
            Some(g) => g.push(i),
            None => out.push(vec![i]),
        }
    }
    out.retain(|g| g.len() > 1);
    out
}

/// Separability of the classes of a table: `columns[b][i]` is band b's value in row i
/// (NaN for nodata), `labels[i]` the row's class index into `classes`.
pub fn separability(
    band_names: &[String],
    columns: &[Vec<f64>],
    labels: &[usize],
    classes: &[String],
    threshold: f64,
) -> Separability {
    let k = classes.len();
    let mut rows_per_class = vec![0usize; k];
    for &c in labels {
        rows_per_class[c] += 1;
    }
    let pairs: Vec<[usize; 2]> = (0..k)
        .flat_map(|a| (a + 1..k).map(move |b| [a, b]))
        .collect();
    let bands: Vec<BandSeparability> = band_names
        .iter()
        .zip(columns)
        .map(|(name, col)| {
            let (anova_f, p_value) = anova_f(col, labels, k);
            let stats: Vec<(f64, f64)> = (0..k)
                .map(|c| {
                    let (m, v, _) = moments(
                        col.iter()
                            .zip(labels)
                            .filter(move |(x, &l)| l == c && x.is_finite())
                            .map(|(&x, _)| x),
                    );
                    (m, v)
                })
                .collect();
            BandSeparability {
                band: name.clone(),
                rows: col.iter().filter(|v| v.is_finite()).count(),
                anova_f,
                p_value,
                jm: pairs
                    .iter()
                    .map(|&[a, b]| jeffries_matusita(stats[a], stats[b]))
                    .collect(),
            }
        })
        .collect();
    let best_band_per_pair = pairs
        .iter()
        .enumerate()
        .map(|(p, &[a, b])| {
            let best = bands
                .iter()
                .filter(|s| !s.jm[p].is_nan())
                .max_by(|x, y| x.jm[p].total_cmp(&y.jm[p]));
            BestBand {
                classes: [classes[a].clone(), classes[b].clone()],
                band: best.map(|s| s.band.clone()),
                jm: best.map_or(f64::NAN, |s| s.jm[p]),
            }
        })
        .collect();
    let nb = columns.len();
    let mut correlation = vec![vec![f64::NAN; nb]; nb];
    for i in 0..nb {
        for j in i..nb {
            let r = if i == j && columns[i].iter().filter(|v| v.is_finite()).count() > 1 {
                1.0
            } else {
                pearson(&columns[i], &columns[j])
            };
            correlation[i][j] = r;
            correlation[j][i] = r;
        }
    }
    let correlated_groups = correlated_groups(&correlation, threshold)
        .into_iter()
        .map(|g| g.into_iter().map(|i| band_names[i].clone()).collect())
        .collect();
    Separability {
        format: FORMAT,
        rows: labels.len(),
        classes: classes.to_vec(),
        rows_per_class,
        pairs,
        jm_model: "per band, each class a univariate Gaussian (mean, unbiased variance): JM = 2(1 - exp(-B)), B the Bhattacharyya distance; 0 = same distribution, 2 = no overlap",
        bands,
        best_band_per_pair,
        correlation_threshold: threshold,
        correlation,
        correlated_groups,
    }
}

fn short(v: f64) -> String {
    if v.is_nan() {
        "-".into()
    } else if v.is_infinite() {
        "inf".into()
    } else if v != 0.0 && (v.abs() >= 1e6 || v.abs() < 1e-3) {
        format!("{v:.2e}")
    } else {
        format!("{v:.3}")
    }
}

impl fmt::Display for Separability {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let name_w = self
            .bands
            .iter()
            .map(|b| b.band.len())
            .max()
            .unwrap_or(4)
            .max(4);
        let pair_name = |p: usize| {
            let [a, b] = self.pairs[p];
            format!("{}/{}", self.classes[a], self.classes[b])
        };
        writeln!(
            f,
            "class separability per band ({} rows; JM: Gaussian classes, 0 same .. 2 apart):",
            self.rows
        )?;
        writeln!(
            f,
            "{:name_w$} {:>10} {:>9} {:>6}  closest pair",
            "band", "F", "p", "min JM"
        )?;
        for b in &self.bands {
            let min = (0..self.pairs.len())
                .filter(|&p| !b.jm[p].is_nan())
                .min_by(|&x, &y| b.jm[x].total_cmp(&b.jm[y]));
            let (jm, pair) = match min {
                Some(p) => (short(b.jm[p]), pair_name(p)),
                None => ("-".into(), "-".into()),
            };
            writeln!(
                f,
                "{:name_w$} {:>10} {:>9} {:>6}  {pair}",
                b.band,
                short(b.anova_f),
                short(b.p_value),
                jm
            )?;
        }
        if !self.best_band_per_pair.is_empty() {
            writeln!(f, "best band per class pair (JM):")?;
            for best in &self.best_band_per_pair {
                writeln!(
                    f,
                    "  {}/{}: {} {}",
                    best.classes[0],
                    best.classes[1],
                    best.band.as_deref().unwrap_or("-"),
                    short(best.jm)
                )?;
            }
        }
        if self.correlated_groups.is_empty() {
            writeln!(
                f,
                "no bands correlated at |r| >= {}",
                self.correlation_threshold
            )
        } else {
            writeln!(
                f,
                "correlated band groups (|r| >= {}, single linkage):",
                self.correlation_threshold
            )?;
            for g in &self.correlated_groups {
                writeln!(f, "  {}", g.join(", "))?;
            }
            Ok(())
        }
    }
}

/// ln Γ(x) for x > 0 (Lanczos approximation, g = 7, 9 coefficients; relative error below
/// 1e-15 — the coefficients are the widely published set, from memory, checked by the
/// tests against Γ(n) = (n − 1)!).
fn ln_gamma(x: f64) -> f64 {
    const G: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        // Reflection: Γ(x) Γ(1 − x) = π / sin(πx).
        return (std::f64::consts::PI / (std::f64::consts::PI * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut a = G[0];
    let t = x + 7.5;
    for (i, &g) in G.iter().enumerate().skip(1) {
        a += g / (x + i as f64);
    }
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + a.ln()
}

/// Continued fraction of the incomplete beta function (modified Lentz), valid for
/// x < (a + 1) / (a + b + 2).
fn beta_fraction(a: f64, b: f64, x: f64) -> f64 {
    const TINY: f64 = 1e-300;
    let (qab, qap, qam) = (a + b, a + 1.0, a - 1.0);
    let mut c = 1.0;
    let mut d = 1.0 - qab * x / qap;
    if d.abs() < TINY {
        d = TINY;
    }
    d = 1.0 / d;
    let mut h = d;
    for m in 1..10_000 {
        let m = m as f64;
        let m2 = 2.0 * m;
        let aa = m * (b - m) * x / ((qam + m2) * (a + m2));
        d = 1.0 + aa * d;
        if d.abs() < TINY {
            d = TINY;
        }
        c = 1.0 + aa / c;
        if c.abs() < TINY {
            c = TINY;
        }
        d = 1.0 / d;
        h *= d * c;
        let aa = -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2));
        d = 1.0 + aa * d;
        if d.abs() < TINY {
            d = TINY;
        }
        c = 1.0 + aa / c;
        if c.abs() < TINY {
            c = TINY;
        }
        d = 1.0 / d;
        let del = d * c;
        h *= del;
        if (del - 1.0).abs() < 1e-16 {
            break;
        }
    }
    h
}

/// Regularised incomplete beta function I_x(a, b) for a, b > 0, 0 ≤ x ≤ 1.
pub fn regularized_beta(x: f64, a: f64, b: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    if x >= 1.0 {
        return 1.0;
    }
    let ln_front = ln_gamma(a + b) - ln_gamma(a) - ln_gamma(b) + a * x.ln() + b * (1.0 - x).ln();
    if x < (a + 1.0) / (a + b + 2.0) {
        ln_front.exp() * beta_fraction(a, b, x) / a
    } else {
        1.0 - ln_front.exp() * beta_fraction(b, a, 1.0 - x) / b
    }
}

/// P(X ≥ f) for X following Fisher's F distribution with (d1, d2) degrees of freedom:
/// I_{d2 / (d2 + d1 f)}(d2 / 2, d1 / 2).
pub fn f_survival(f: f64, d1: f64, d2: f64) -> f64 {
    if f <= 0.0 {
        return 1.0;
    }
    regularized_beta(d2 / (d2 + d1 * f), d2 / 2.0, d1 / 2.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn anova_matches_a_hand_worked_example() {
        // Classes {1, 2, 3}, {4, 5, 6}: means 2 and 5, grand mean 3.5; between = 3·1.5²·2
        // = 13.5 on 1 df; within = 2 + 2 = 4 on 4 df; F = 13.5 / 1 = 13.5 (hand values).
        let v = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, f64::NAN];
        let l = [0, 0, 0, 1, 1, 1, 1];
        let (f, p) = anova_f(&v, &l, 2);
        assert!((f - 13.5).abs() < 1e-12, "{f}");
        // With d1 = 1 the F test is the two-sided t test: t² = F, t = 3.674 on 4 df;
        // p = I_{4/(4+13.5)}(2, 1/2). Closed form for a = 2, b = 1/2 (integrating
        // t^(1)(1−t)^(−1/2)): B·I_x = 4/3 − 2√(1−x) + (2/3)(1−x)^(3/2), B(2, ½) = 4/3.
        let x: f64 = 4.0 / 17.5;
        let want =
            (4.0 / 3.0 - 2.0 * (1.0 - x).sqrt() + 2.0 / 3.0 * (1.0 - x).powf(1.5)) / (4.0 / 3.0);
        assert!((p - want).abs() < 1e-13, "{p} {want}");
        // One class, or no within-class degrees of freedom: undefined.
        assert!(anova_f(&[1.0, 2.0], &[0, 0], 2).0.is_nan());
        assert!(anova_f(&[1.0, 2.0], &[0, 1], 2).0.is_nan());
        // Constant classes with different means: infinite F, p = 0.
        let (f, p) = anova_f(&[1.0, 1.0, 2.0, 2.0], &[0, 0, 1, 1], 2);
        assert!(f.is_infinite() && p == 0.0);
    }

    #[test]
    fn f_survival_closed_forms() {
        // d1 = 2: P(F ≥ f) = (1 + 2f/d2)^(−d2/2) (closed form of the F(2, d2) tail).
        for &(f, d2) in &[(0.5f64, 3.0f64), (3.0, 10.0), (40.0, 7.0), (1e3, 50.0)] {
            let want = (1.0 + 2.0 * f / d2).powf(-d2 / 2.0);
            let got = f_survival(f, 2.0, d2);
            assert!(
                (got - want).abs() <= 1e-12 * want.max(1e-300),
                "{f} {d2}: {got} {want}"
            );
        }
        // Γ(n) = (n − 1)!.
        for (n, fact) in [(1.0, 1.0), (5.0, 24.0), (11.0, 3_628_800.0)] {
            assert!((ln_gamma(n) - f64::ln(fact)).abs() < 1e-12);
        }
        assert!((ln_gamma(0.5) - std::f64::consts::PI.sqrt().ln()).abs() < 1e-13);
    }

    #[test]
    fn jm_limits_and_a_hand_value() {
        // Same Gaussian: 0. Equal variances 1, means 2 apart: B = 4 / 8 = 0.5,
        // JM = 2(1 − e^(−0.5)) = 0.786938680574733 (hand value).
        assert_eq!(jeffries_matusita((1.0, 2.0), (1.0, 2.0)), 0.0);
        let jm = jeffries_matusita((0.0, 1.0), (2.0, 1.0));
        assert!((jm - 0.786_938_680_574_733).abs() < 1e-14, "{jm}");
        // Same mean, variances 1 and 4: B = ½ ln(5 / 4) (hand value).
        let jm = jeffries_matusita((0.0, 1.0), (0.0, 4.0));
        assert!((jm - 2.0 * (1.0 - (-0.5 * 1.25f64.ln()).exp())).abs() < 1e-14);
        // Far apart: close to 2, never above.
        let jm = jeffries_matusita((0.0, 1.0), (100.0, 1.0));
        assert!(jm <= 2.0 && jm > 2.0 - 1e-12);
        assert_eq!(jeffries_matusita((0.0, 0.0), (1.0, 0.0)), 2.0);
        assert!(jeffries_matusita((0.0, f64::NAN), (1.0, 1.0)).is_nan());
    }

    #[test]
    fn correlation_groups_by_single_linkage() {
        // a–b and b–c correlated, a–c not: single linkage puts all three in one group.
        let r = vec![
            vec![1.0, 0.95, 0.8, 0.0],
            vec![0.95, 1.0, -0.92, 0.1],
            vec![0.8, -0.92, 1.0, 0.0],
            vec![0.0, 0.1, 0.0, 1.0],
        ];
        assert_eq!(correlated_groups(&r, 0.9), vec![vec![0, 1, 2]]);
        assert!(correlated_groups(&r, 0.99).is_empty());
        let a = [1.0, 2.0, 3.0, f64::NAN, 5.0];
        let b = [2.0, 4.0, 6.0, 1.0, 10.0];
        assert!((pearson(&a, &b) - 1.0).abs() < 1e-15);
        let c = [3.0, 2.0, 1.0, 0.0, -1.0];
        assert!((pearson(&a, &c) + 1.0).abs() < 1e-15);
        assert!(pearson(&a, &[1.0; 5]).is_nan());
    }

    #[test]
    fn table_summary_names_best_bands_and_groups() {
        let names: Vec<String> = ["height", "ndvi", "ndvi2"].map(String::from).to_vec();
        let classes: Vec<String> = ["scrub", "tall_meadow"].map(String::from).to_vec();
        // Height separates, ndvi overlaps; ndvi2 = 2·ndvi.
        let labels = [0, 0, 0, 0, 1, 1, 1, 1];
        let h = vec![2.0, 2.2, 1.9, 2.1, 0.9, 1.0, 1.1, 0.8];
        let n = vec![0.7, 0.8, 0.75, 0.72, 0.74, 0.79, 0.71, 0.77];
        let n2: Vec<f64> = n.iter().map(|v| 2.0 * v).collect();
        let s = separability(&names, &[h, n, n2], &labels, &classes, 0.9);
        assert_eq!(s.pairs, vec![[0, 1]]);
        assert_eq!(s.best_band_per_pair[0].band.as_deref(), Some("height"));
        assert_eq!(
            s.correlated_groups,
            vec![vec!["ndvi".to_string(), "ndvi2".into()]]
        );
        assert!(s.bands[0].anova_f > 50.0 && s.bands[1].anova_f < 1.0);
        let text = s.to_string();
        assert!(text.contains("scrub/tall_meadow: height"), "{text}");
        assert!(text.contains("ndvi, ndvi2"), "{text}");
        let json = serde_json::to_value(&s).unwrap();
        assert_eq!(json["format"], FORMAT);
        assert_eq!(json["bands"][0]["jm"].as_array().unwrap().len(), 1);
    }
}
