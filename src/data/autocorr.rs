//! Autocorrelation, integrated autocorrelation time by Sokal's automatic windowing, effective
//! sample size, and a recommended saving interval for the high-fidelity campaign.
//!
//! - ρ(k) = Σ_{i=k}^{N−1} (y_i − ȳ)(y_{i−k} − ȳ) / Σ_{i=0}^{N−1} (y_i − ȳ)² (the NIST StRD
//!   convention for the lag-1 coefficient r(1), extended to lag k; biased, divisor independent
//!   of k, so the sequence is positive semi-definite);
//! - τ_int(W) = 1 + 2 Σ_{k=1}^{W} ρ(k), with the window W the smallest lag such that
//!   W ≥ c · τ_int(W), c = 5 by default (Sokal 1997; Madras & Sokal 1988); computed by a direct
//!   O(N·W) loop, no FFT;
//! - effective sample size ESS = N / τ_int, per variable;
//! - the estimate is flagged unreliable when N < 50 τ_int (Sokal 1997 asks for N ≳ 1000 τ for a
//!   precise τ; below 50 τ the window itself is poorly determined) or when no window satisfies
//!   the condition before W = N/2;
//! - recommended saving interval: stride k = max(1, ⌊τ_max / 2⌋) samples, τ_max the largest
//!   τ_int over the variables, i.e. about τ·Δt/2 rounded down to a whole multiple of Δt. Samples
//!   τ/2 apart still carry nearly all the information of the full series (τ' ≈ τ/k, so
//!   ESS = (N/k)/(τ/k) is unchanged), and the saved storage is the share 1 − 1/k.
//!
//! The saving interval advice is for samples used as (nearly) independent draws, e.g. training
//! pairs of a closure mapping the resolved state to its subgrid term. An emulator that steps at
//! the saving interval must keep the interval it steps at.
//!
//! Estimator variance: var(τ̂) ≈ 2(2W + 1)/N · τ² (Sokal 1997, eq. 3.19; Madras & Sokal 1988).
//!
//! References: A. D. Sokal (1997), Monte Carlo methods in statistical mechanics: foundations and
//! new algorithms, in Functional Integration (Cargèse 1996), Springer, 131–192; N. Madras &
//! A. D. Sokal (1988), J. Stat. Phys. 50, 109–186; NIST StRD univariate summary statistics.

use ndarray::ArrayView2;
use serde::{Deserialize, Serialize};

/// Sokal's default window constant c.
pub const DEFAULT_WINDOW_CONSTANT: f64 = 5.0;

/// Below `RELIABLE_LENGTH` · τ_int samples the estimate is flagged.
pub const RELIABLE_LENGTH: f64 = 50.0;

/// Errors from the autocorrelation estimates.
#[derive(Debug, thiserror::Error)]
pub enum AutocorrError {
    #[error("variable '{variable}' has {samples} samples; at least 3 are needed for an autocorrelation time")]
    TooShort { variable: String, samples: usize },
    #[error(
        "variable '{variable}' is constant; its autocorrelation is undefined (drop the variable)"
    )]
    Constant { variable: String },
    #[error(
        "variable '{variable}' holds a non-finite value at sample {sample}; repair or remove it"
    )]
    NonFinite { variable: String, sample: usize },
    #[error("window constant c = {0} is invalid; use a number between 1 and 20 (Sokal suggests 4–10, default 5)")]
    WindowConstant(f64),
    #[error("sample interval {0} is invalid; it must be a positive number of model time units")]
    SampleInterval(f64),
}

/// Mean-centred series and its sum of squares; the mean gets one refinement pass so that
/// series with a large offset (NIST Mavro, NumAcc) keep their digits.
fn centred(y: &[f64]) -> (Vec<f64>, f64) {
    let n = y.len() as f64;
    let mut mean = y.iter().sum::<f64>() / n;
    mean += y.iter().map(|v| v - mean).sum::<f64>() / n;
    let d: Vec<f64> = y.iter().map(|v| v - mean).collect();
    let c0 = d.iter().map(|v| v * v).sum();
    (d, c0)
}

fn lag_sum(d: &[f64], k: usize) -> f64 {
    d[k..]
        .iter()
        .zip(&d[..d.len() - k])
        .map(|(a, b)| a * b)
        .sum()
}

/// ρ(0), …, ρ(max_lag) (NIST convention, see the module docs); empty when the series is
/// constant or shorter than 2. `max_lag` is capped at N − 1.
pub fn autocorrelation(y: &[f64], max_lag: usize) -> Vec<f64> {
    if y.len() < 2 {
        return Vec::new();
    }
    let (d, c0) = centred(y);
    if c0 == 0.0 {
        return Vec::new();
    }
    (0..=max_lag.min(y.len() - 1))
        .map(|k| lag_sum(&d, k) / c0)
        .collect()
}

/// Integrated autocorrelation time of one series.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct IntegratedTime {
    /// τ_int in samples.
    pub tau: f64,
    /// Window W where W ≥ c·τ_int(W) first held (or the last lag tried).
    pub window: usize,
    /// `false` when no window up to N/2 met the condition.
    pub converged: bool,
    /// ρ(1).
    pub lag1: f64,
    /// Standard error of τ by Sokal's formula √(2(2W + 1)/N) · τ.
    pub std_error: f64,
}

/// τ_int by Sokal's automatic windowing with constant `c` (see the module docs).
pub fn integrated_time(y: &[f64], c: f64) -> Option<IntegratedTime> {
    let n = y.len();
    if n < 3 {
        return None;
    }
    let (d, c0) = centred(y);
    if c0 == 0.0 {
        return None;
    }
    let max_w = n / 2;
    let mut tau = 1.0;
    let mut lag1 = 0.0;
    let mut window = 0;
    let mut converged = false;
    for w in 1..=max_w {
        let rho = lag_sum(&d, w) / c0;
        if w == 1 {
            lag1 = rho;
        }
        tau += 2.0 * rho;
        window = w;
        if w as f64 >= c * tau {
            converged = true;
            break;
        }
    }
    Some(IntegratedTime {
        tau,
        window,
        converged,
        lag1,
        std_error: (2.0 * (2 * window + 1) as f64 / n as f64).sqrt() * tau.abs(),
    })
}

/// Effective sample size of one variable.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct VariableEss {
    pub variable: String,
    pub samples: usize,
    pub time: IntegratedTime,
    /// N / τ_int.
    pub ess: f64,
    /// τ_int in model time units (τ_int · Δt).
    pub tau_time: f64,
    /// N < 50 τ_int, or the window did not converge: the estimate is unreliable.
    pub unreliable: bool,
}

/// Effective sample sizes of every variable and the recommended saving interval.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct EssReport {
    pub window_constant: f64,
    /// Δt of the data, model time units.
    pub sample_interval: f64,
    pub variables: Vec<VariableEss>,
    /// Largest τ_int over the variables, samples.
    pub tau_max: f64,
    /// k = max(1, ⌊τ_max/2⌋): save every k-th sample.
    pub recommended_stride: usize,
    /// k · Δt, model time units.
    pub recommended_interval: f64,
    /// 1 − 1/k: share of snapshot storage saved by the recommended interval.
    pub storage_share_saved: f64,
    /// Some variable's estimate is unreliable.
    pub any_unreliable: bool,
}

impl EssReport {
    /// Bytes saved by the recommended interval when `storage_bytes` were planned at Δt.
    pub fn storage_saved(&self, storage_bytes: f64) -> f64 {
        storage_bytes * self.storage_share_saved
    }

    /// Smallest per-variable effective sample size.
    pub fn min_ess(&self) -> f64 {
        self.variables
            .iter()
            .map(|v| v.ess)
            .fold(f64::INFINITY, f64::min)
    }
}

/// Effective sample size of each column of `values` (samples × variables) sampled every
/// `sample_interval`, with Sokal's window constant `c` ([`DEFAULT_WINDOW_CONSTANT`] is 5).
/// Non-finite values are an error (never silently skipped).
pub fn effective_sample_size(
    values: ArrayView2<f64>,
    names: &[String],
    sample_interval: f64,
    c: f64,
) -> Result<EssReport, AutocorrError> {
    if !(c.is_finite() && (1.0..=20.0).contains(&c)) {
        return Err(AutocorrError::WindowConstant(c));
    }
    if !(sample_interval.is_finite() && sample_interval > 0.0) {
        return Err(AutocorrError::SampleInterval(sample_interval));
    }
    let n = values.nrows();
    let mut variables = Vec::with_capacity(values.ncols());
    for (j, col) in values.columns().into_iter().enumerate() {
        let variable = names.get(j).cloned().unwrap_or_else(|| format!("x{j}"));
        let y: Vec<f64> = col.iter().copied().collect();
        if let Some(sample) = y.iter().position(|v| !v.is_finite()) {
            return Err(AutocorrError::NonFinite { variable, sample });
        }
        if n < 3 {
            return Err(AutocorrError::TooShort {
                variable,
                samples: n,
            });
        }
        let time = integrated_time(&y, c).ok_or(AutocorrError::Constant {
            variable: variable.clone(),
        })?;
        let unreliable = !time.converged || (n as f64) < RELIABLE_LENGTH * time.tau;
        variables.push(VariableEss {
            variable,
            samples: n,
            ess: n as f64 / time.tau,
            tau_time: time.tau * sample_interval,
            unreliable,
            time,
        });
    }
    let tau_max = variables.iter().map(|v| v.time.tau).fold(1.0_f64, f64::max);
    let stride = ((tau_max / 2.0).floor() as usize).max(1);
    Ok(EssReport {
        window_constant: c,
        sample_interval,
        any_unreliable: variables.iter().any(|v| v.unreliable),
        variables,
        tau_max,
        recommended_stride: stride,
        recommended_interval: stride as f64 * sample_interval,
        storage_share_saved: 1.0 - 1.0 / stride as f64,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    const NIST: &str = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../shared/reference-data/nist/"
    );

    /// The data block of a NIST StRD univariate file: the numbers after the "Data: Y" header and
    /// its dashed rule.
    fn nist_values(file: &str) -> Vec<f64> {
        let text = std::fs::read_to_string(format!("{NIST}univariate/{file}")).unwrap();
        let mut lines = text
            .lines()
            .skip_while(|l| !l.trim_start().starts_with("Data: Y"));
        lines.next();
        lines.next(); // the dashed rule
        lines
            .filter(|l| !l.trim().is_empty())
            .map(|l| l.trim().parse::<f64>().unwrap())
            .collect()
    }

    #[test]
    fn nist_lag1_autocorrelation_to_12_digits() {
        // NIST StRD univariate certified r(1), from nist/tables/univariate_autocorr.tsv; the
        // NumAcc sets listed there are not in the reference folder, so the four real-world sets
        // present are checked. Tolerance: 1e-12 relative.
        let table =
            std::fs::read_to_string(format!("{NIST}tables/univariate_autocorr.tsv")).unwrap();
        let mut checked = 0;
        for line in table.lines().skip(1) {
            let f: Vec<&str> = line.split('\t').collect();
            let (n, r1, file) = (
                f[1].parse::<usize>().unwrap(),
                f[4].parse::<f64>().unwrap(),
                f[5],
            );
            let path = format!("{NIST}{file}");
            if !std::path::Path::new(&path).exists() {
                continue;
            }
            let y = nist_values(file.trim_start_matches("univariate/"));
            assert_eq!(y.len(), n, "{file}");
            let rho = autocorrelation(&y, 1);
            assert!(
                (rho[1] - r1).abs() <= 1e-12 * r1.abs(),
                "{file}: {} vs {r1}",
                rho[1]
            );
            assert_eq!(rho[0], 1.0);
            let t = integrated_time(&y, 5.0).unwrap();
            assert!((t.lag1 - r1).abs() <= 1e-12 * r1.abs(), "{file}");
            checked += 1;
        }
        assert_eq!(checked, 4, "Lew, Lottery, Mavro and Michelso are present");
    }

    fn ar1(rho: f64, n: usize, seed: u64) -> Vec<f64> {
        // Uniform innovations of unit variance; τ = (1 + ρ)/(1 − ρ) holds for any i.i.d.
        // innovations of finite variance. 1000 steps of burn-in from x = 0.
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut x = 0.0;
        let mut out = Vec::with_capacity(n);
        for i in 0..n + 1000 {
            let e: f64 = (rng.random::<f64>() - 0.5) * 12f64.sqrt();
            x = rho * x + e;
            if i >= 1000 {
                out.push(x);
            }
        }
        out
    }

    #[test]
    fn ar1_recovers_the_analytic_tau() {
        // τ = (1 + ρ)/(1 − ρ) (nist/tables/ar1_ess_analytic.tsv; Geyer, Stat 8054 notes).
        // Tolerance: 4 standard errors by Sokal's variance 2(2W + 1)/N · τ² (Sokal 1997), plus the
        // windowing bias 2ρ^(W+1)/(1 − ρ), negligible here (< 1e-4).
        let table = std::fs::read_to_string(format!("{NIST}tables/ar1_ess_analytic.tsv")).unwrap();
        let expected = |rho: f64| {
            table
                .lines()
                .skip(1)
                .map(|l| l.split('\t').collect::<Vec<_>>())
                .find(|f| f[1].parse::<f64>().unwrap() == rho)
                .map(|f| f[2].parse::<f64>().unwrap())
                .unwrap()
        };
        let n = 200_000;
        for (rho, seed) in [(0.5, 11), (0.9, 12)] {
            let tau = expected(rho);
            assert!((tau - (1.0 + rho) / (1.0 - rho)).abs() < 1e-12);
            let y = ar1(rho, n, seed);
            let t = integrated_time(&y, 5.0).unwrap();
            assert!(t.converged);
            let sigma = (2.0 * (2 * t.window + 1) as f64 / n as f64).sqrt() * tau;
            let bias = 2.0 * rho.powi(t.window as i32 + 1) / (1.0 - rho);
            assert!(
                (t.tau - tau).abs() <= 4.0 * sigma + bias,
                "ρ = {rho}: τ̂ = {} (W = {}), τ = {tau}, σ = {sigma}",
                t.tau,
                t.window
            );
            assert!((t.lag1 - rho).abs() < 0.01, "ρ(1) = {}", t.lag1);
        }
    }

    #[test]
    fn ess_report_and_saving_interval() {
        let n = 200_000;
        let (a, b) = (ar1(0.5, n, 3), ar1(0.9, n, 4));
        let values = Array2::from_shape_fn((n, 2), |(i, j)| if j == 0 { a[i] } else { b[i] });
        let names = vec!["fast".to_string(), "slow".to_string()];
        let r =
            effective_sample_size(values.view(), &names, 0.01, DEFAULT_WINDOW_CONSTANT).unwrap();
        assert_eq!(r.variables.len(), 2);
        let slow = &r.variables[1];
        assert!((slow.ess - n as f64 / slow.time.tau).abs() < 1e-9);
        assert!(!r.any_unreliable);
        // τ_max ≈ 19: stride ⌊τ_max/2⌋ = 9 (τ̂ within ±2.6 of 19 keeps it in 8..=10).
        assert!(
            (8..=10).contains(&r.recommended_stride),
            "{}",
            r.recommended_stride
        );
        let k = r.recommended_stride as f64;
        assert!((r.recommended_interval - k * 0.01).abs() < 1e-15);
        assert!((r.storage_saved(1000.0) - 1000.0 * (1.0 - 1.0 / k)).abs() < 1e-9);
        // A short series is flagged: 500 samples < 50 × 19.
        let short = Array2::from_shape_fn((500, 1), |(i, _)| b[i]);
        let r = effective_sample_size(short.view(), &names[1..], 0.01, 5.0).unwrap();
        assert!(r.any_unreliable);
    }

    #[test]
    fn white_noise_and_bad_input() {
        let y = ar1(0.0, 50_000, 5);
        let t = integrated_time(&y, 5.0).unwrap();
        assert!((t.tau - 1.0).abs() < 0.05, "{}", t.tau);
        let constant = Array2::from_elem((100, 1), 3.0);
        let e = effective_sample_size(constant.view(), &["u".into()], 0.1, 5.0).unwrap_err();
        assert!(e.to_string().contains("'u' is constant"), "{e}");
        let mut nan = Array2::from_shape_fn((100, 1), |(i, _)| i as f64);
        nan[[7, 0]] = f64::NAN;
        let e = effective_sample_size(nan.view(), &["u".into()], 0.1, 5.0).unwrap_err();
        assert!(e.to_string().contains("sample 7"), "{e}");
        let ok = Array2::from_shape_fn((100, 1), |(i, _)| (i % 7) as f64);
        assert!(effective_sample_size(ok.view(), &[], 0.0, 5.0).is_err());
        assert!(effective_sample_size(ok.view(), &[], 0.1, 0.5).is_err());
        // ρ(1) by hand: y = 1, 2, 3: ȳ = 2, Σd² = 2, Σ d_i d_{i−1} = 0·(−1) + 1·0 = 0.
        assert_eq!(autocorrelation(&[1.0, 2.0, 3.0], 1), vec![1.0, 0.0]);
    }
}
