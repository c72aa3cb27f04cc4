//! A generic weighted nonlinear least-squares engine (Levenberg–Marquardt via the
//! `levenberg-marquardt` crate) with one-sided "censored" residuals and standard errors.
//!
//! Residual of observation i: `r_i = w_i (f(x_i; p) − y_i)`; for a censored observation
//! (`lower_bound_only`, y is only a lower bound on the truth) `r_i = w_i · min(0, f(x_i; p) − y_i)`,
//! whose gradient is zero while the constraint is inactive (f ≥ y). The engine minimises
//! `Σ r_i²` with MINPACK-like tight tolerances (ftol = xtol = gtol = 30ε) and reports
//! standard errors `sqrt(RSS/(m − p) · diag((JᵀJ)⁻¹))` at the solution, J the Jacobian of the
//! weighted residuals and m the number of observations (censored ones included); this is
//! how NIST computes its certified standard deviations.
//!
//! References: Levenberg (1944); Marquardt (1963); Moré (1978), MINPACK LMDER; NIST StRD
//! nonlinear regression datasets Misra1a, Misra1b, Misra1d, DanWood, Rat42, MGH09, Thurber and
//! Eckerle4 (validation in the tests below, from both certified starts).

use levenberg_marquardt::{LeastSquaresProblem, LevenbergMarquardt, TerminationReason};
use nalgebra::{storage::Owned, DMatrix, DVector, Dyn};

use super::CurveError;

/// A model `f(x; p)` with an analytic gradient in the parameters.
pub trait Model {
    /// Number of parameters p.
    fn n_params(&self) -> usize;
    /// Model value at x for parameters `p` (length [`Model::n_params`]).
    fn eval(&self, p: &[f64], x: f64) -> f64;
    /// Gradient ∂f/∂p at x, written into `out` (length [`Model::n_params`]).
    fn grad(&self, p: &[f64], x: f64, out: &mut [f64]);
}

/// One data point of a weighted fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Observation {
    pub x: f64,
    pub y: f64,
    /// Residual weight, normally 1/σ of y (must be finite and > 0).
    pub weight: f64,
    /// Censored point: y is only a lower bound; residual = weight·min(0, f(x) − y).
    pub lower_bound_only: bool,
}

impl Observation {
    /// An ordinary (uncensored) observation with weight 1.
    pub fn unit(x: f64, y: f64) -> Self {
        Observation {
            x,
            y,
            weight: 1.0,
            lower_bound_only: false,
        }
    }
}

/// Outcome of [`least_squares`].
#[derive(Debug, Clone, PartialEq)]
pub struct LsqResult {
    pub params: Vec<f64>,
    /// Weighted residual sum of squares Σ r_i² at `params`.
    pub rss: f64,
    /// `sqrt(rss/(m−p) · diag((JᵀJ)⁻¹))` at the solution; `None` if JᵀJ is numerically
    /// singular or m ≤ p.
    pub std_errors: Option<Vec<f64>>,
    /// The optimiser met one of its convergence tests (relative reduction of the sum of
    /// squares, relative step size, or orthogonality of residuals and Jacobian columns), or
    /// stopped because no further improvement is possible at machine precision.
    pub converged: bool,
    /// Number of residual evaluations used.
    pub evaluations: usize,
}

/// A residual that replaces a non-finite model value at a trial point: large enough that the
/// optimiser rejects the step and shrinks its trust region, small enough that its square
/// summed over many points stays finite.
const REJECT_RESIDUAL: f64 = 1e100;

struct Problem<'a> {
    model: &'a dyn Model,
    obs: &'a [Observation],
    p: DVector<f64>,
}

impl Problem<'_> {
    fn residual_vec(&self) -> DVector<f64> {
        let p = self.p.as_slice();
        DVector::from_iterator(
            self.obs.len(),
            self.obs.iter().map(|o| {
                let f = self.model.eval(p, o.x);
                if !f.is_finite() {
                    return REJECT_RESIDUAL;
                }
                let r = o.weight * (f - o.y);
                if o.lower_bound_only {
                    r.min(0.0)
                } else {
                    r
                }
            }),
        )
    }

    fn jacobian_mat(&self) -> DMatrix<f64> {
        let p = self.p.as_slice();
        let k = self.model.n_params();
        let mut jac = DMatrix::<f64>::zeros(self.obs.len(), k);
        let mut g = vec![0.0; k];
        for (i, o) in self.obs.iter().enumerate() {
            if o.lower_bound_only && self.model.eval(p, o.x) >= o.y {
                continue; // inactive one-sided residual: zero row
            }
            self.model.grad(p, o.x, &mut g);
            for (j, gj) in g.iter().enumerate() {
                jac[(i, j)] = o.weight * gj;
            }
        }
        jac
    }
}

impl LeastSquaresProblem<f64, Dyn, Dyn> for Problem<'_> {
    type ResidualStorage = Owned<f64, Dyn>;
    type JacobianStorage = Owned<f64, Dyn, Dyn>;
    type ParameterStorage = Owned<f64, Dyn>;

    fn set_params(&mut self, x: &DVector<f64>) {
        self.p.copy_from(x);
    }

    fn params(&self) -> DVector<f64> {
        self.p.clone()
    }

    fn residuals(&self) -> Option<DVector<f64>> {
        Some(self.residual_vec())
    }

    fn jacobian(&self) -> Option<DMatrix<f64>> {
        let j = self.jacobian_mat();
        j.iter().all(|v| v.is_finite()).then_some(j)
    }
}

fn validate(model: &dyn Model, obs: &[Observation], start: &[f64]) -> Result<(), CurveError> {
    let k = model.n_params();
    if start.len() != k {
        return Err(CurveError::StartLength {
            expected: k,
            got: start.len(),
        });
    }
    if start.iter().any(|v| !v.is_finite()) {
        return Err(CurveError::NonFiniteStart {
            start: start.to_vec(),
        });
    }
    if obs.is_empty() {
        return Err(CurveError::NoObservations);
    }
    for (index, o) in obs.iter().enumerate() {
        if !(o.x.is_finite() && o.y.is_finite() && o.weight.is_finite() && o.weight > 0.0) {
            return Err(CurveError::InvalidObservation {
                index,
                x: o.x,
                y: o.y,
                weight: o.weight,
            });
        }
    }
    let mut g = vec![0.0; k];
    for o in obs {
        model.grad(start, o.x, &mut g);
        if !model.eval(start, o.x).is_finite() || g.iter().any(|v| !v.is_finite()) {
            return Err(CurveError::ModelNotFiniteAtStart {
                start: start.to_vec(),
            });
        }
    }
    Ok(())
}

/// Standard errors `sqrt(rss/(m−p) · diag((JᵀJ)⁻¹))` from the Jacobian J of the weighted
/// residuals. The inverse is formed from the SVD of the column-equilibrated J (never from the
/// normal equations), and J is declared singular when its smallest singular value is below
/// `max(m, p) · ε` times the largest.
pub(crate) fn standard_errors(jac: &DMatrix<f64>, rss: f64) -> Option<Vec<f64>> {
    let (m, k) = jac.shape();
    if m <= k || k == 0 || !rss.is_finite() {
        return None;
    }
    let scale: Vec<f64> = (0..k).map(|j| jac.column(j).norm()).collect();
    if scale.iter().any(|s| !(s.is_finite() && *s > 0.0)) {
        return None;
    }
    let mut js = jac.clone();
    for (j, s) in scale.iter().enumerate() {
        js.column_mut(j).scale_mut(1.0 / s);
    }
    let svd = js.svd(false, true);
    let v_t = svd.v_t?;
    let s = &svd.singular_values;
    let s_max = s.max();
    let s_min = s.min();
    if s_min.is_nan() || s_min <= (m.max(k) as f64) * f64::EPSILON * s_max {
        return None;
    }
    let sigma2 = rss / (m - k) as f64;
    let se = (0..k)
        .map(|i| {
            let c: f64 = (0..k).map(|r| (v_t[(r, i)] / s[r]).powi(2)).sum();
            (sigma2 * c).sqrt() / scale[i]
        })
        .collect();
    Some(se)
}

/// Minimise `Σ r_i²` (see the module doc for r_i) from `start` with Levenberg–Marquardt at
/// MINPACK-like tight tolerances.
///
/// Errors: wrong start length, non-finite start, no observations, an invalid observation, or
/// a model that is not finite at the start. A run that stops without meeting a convergence
/// test is returned with `converged == false`, not as an error.
pub fn least_squares(
    model: &dyn Model,
    obs: &[Observation],
    start: &[f64],
) -> Result<LsqResult, CurveError> {
    validate(model, obs, start)?;
    let problem = Problem {
        model,
        obs,
        p: DVector::from_column_slice(start),
    };
    let lm = LevenbergMarquardt::new().with_patience(1000);
    let (problem, report) = lm.minimize(problem);
    let converged = report.termination.was_successful()
        || matches!(
            report.termination,
            TerminationReason::NoImprovementPossible(_)
        );
    let r = problem.residual_vec();
    let rss = r.norm_squared();
    let std_errors = if rss.is_finite() && problem.p.iter().all(|v| v.is_finite()) {
        standard_errors(&problem.jacobian_mat(), rss)
    } else {
        None
    };
    Ok(LsqResult {
        params: problem.p.as_slice().to_vec(),
        rss,
        std_errors,
        converged,
        evaluations: report.number_of_evaluations,
    })
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// A parsed NIST StRD nonlinear-regression file.
    #[derive(Debug)]
    pub(crate) struct NistSet {
        pub start1: Vec<f64>,
        pub start2: Vec<f64>,
        pub certified: Vec<f64>,
        pub certified_sd: Vec<f64>,
        pub certified_rss: f64,
        /// (x, y) pairs.
        pub data: Vec<(f64, f64)>,
    }

    /// Parse a NIST StRD nonlinear .dat file: parameter lines `bK = start1 start2 value sd`,
    /// the `Residual Sum of Squares:` line, and the data block (columns `y x`) after the
    /// second `Data:` header, whose count is taken from the `N Observations` line.
    pub(crate) fn parse_nist(path: &str) -> NistSet {
        let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("read {path}: {e}"));
        let mut set = NistSet {
            start1: vec![],
            start2: vec![],
            certified: vec![],
            certified_sd: vec![],
            certified_rss: f64::NAN,
            data: vec![],
        };
        let mut n_obs = None;
        let mut data_headers = 0;
        let mut in_data = false;
        for line in text.lines() {
            let t = line.trim();
            if in_data {
                let v: Vec<f64> = t
                    .split_whitespace()
                    .map(|s| s.parse().expect("data value"))
                    .collect();
                if v.len() == 2 {
                    set.data.push((v[1], v[0]));
                }
                continue;
            }
            if t.starts_with("Data:") {
                data_headers += 1;
                if data_headers == 2 {
                    in_data = true;
                }
                continue;
            }
            if let Some(rest) = t.strip_prefix("Residual Sum of Squares:") {
                set.certified_rss = rest.trim().parse().expect("rss");
            } else if t.ends_with("Observations") && n_obs.is_none() {
                n_obs = t
                    .split_whitespace()
                    .next()
                    .and_then(|s| s.parse::<usize>().ok());
            } else if t.starts_with('b') && t.contains('=') {
                let rhs = t.split('=').nth(1).unwrap();
                let v: Vec<f64> = rhs
                    .split_whitespace()
                    .map(|s| s.parse().expect("parameter value"))
                    .collect();
                assert_eq!(v.len(), 4, "parameter line {t}");
                set.start1.push(v[0]);
                set.start2.push(v[1]);
                set.certified.push(v[2]);
                set.certified_sd.push(v[3]);
            }
        }
        assert_eq!(Some(set.data.len()), n_obs, "observation count in {path}");
        assert!(set.certified_rss.is_finite() && !set.certified.is_empty());
        set
    }

    pub(crate) fn nist_path(name: &str) -> String {
        format!(
            "{}/../shared/reference-data/nist/{name}.dat",
            env!("CARGO_MANIFEST_DIR")
        )
    }

    /// Number of matching significant digits, −log10(|a − b|/|b|).
    pub(crate) fn digits(a: f64, b: f64) -> f64 {
        if a == b {
            return 16.0;
        }
        -((a - b).abs() / b.abs()).log10()
    }

    /// Check a fit against a NIST set: parameters to `p_digits` significant digits,
    /// standard deviations to `sd_digits`, residual sum of squares to `rss_digits`.
    #[allow(clippy::too_many_arguments)] // test helper: data, fit and three tolerances
    pub(crate) fn check_nist(
        label: &str,
        set: &NistSet,
        params: &[f64],
        sds: &[f64],
        rss: f64,
        p_digits: f64,
        sd_digits: f64,
        rss_digits: f64,
    ) {
        for (i, (&got, &want)) in params.iter().zip(&set.certified).enumerate() {
            let d = digits(got, want);
            assert!(
                d >= p_digits,
                "{label}: b{} = {got:e}, certified {want:e} ({d:.1} digits)",
                i + 1
            );
        }
        for (i, (&got, &want)) in sds.iter().zip(&set.certified_sd).enumerate() {
            let d = digits(got, want);
            assert!(
                d >= sd_digits,
                "{label}: sd(b{}) = {got:e}, certified {want:e} ({d:.1} digits)",
                i + 1
            );
        }
        let d = digits(rss, set.certified_rss);
        let min_digits = |got: &[f64], want: &[f64]| {
            got.iter()
                .zip(want)
                .map(|(&g, &w)| digits(g, w))
                .fold(f64::INFINITY, f64::min)
        };
        eprintln!(
            "{label}: digits matched: params {:.1}, std devs {:.1}, rss {d:.1}",
            min_digits(params, &set.certified),
            min_digits(sds, &set.certified_sd)
        );
        assert!(
            d >= rss_digits,
            "{label}: rss = {rss:e}, certified {:e} ({d:.1} digits)",
            set.certified_rss
        );
    }

    fn unit_obs(set: &NistSet) -> Vec<Observation> {
        set.data
            .iter()
            .map(|&(x, y)| Observation::unit(x, y))
            .collect()
    }

    /// Fit a NIST set from both certified starts through `least_squares` and check it.
    fn run_nist(name: &str, model: &dyn Model, p_digits: f64, sd_digits: f64, rss_digits: f64) {
        let set = parse_nist(&nist_path(name));
        let obs = unit_obs(&set);
        for (label, start) in [("start 1", &set.start1), ("start 2", &set.start2)] {
            let fit = least_squares(model, &obs, start).unwrap();
            assert!(fit.converged, "{name} {label}: not converged: {fit:?}");
            let se = fit.std_errors.clone().expect("standard errors");
            check_nist(
                &format!("{name} {label}"),
                &set,
                &fit.params,
                &se,
                fit.rss,
                p_digits,
                sd_digits,
                rss_digits,
            );
        }
    }

    /// Misra1a: y = b1 (1 − exp(−b2 x)).
    struct Misra1a;
    impl Model for Misra1a {
        fn n_params(&self) -> usize {
            2
        }
        fn eval(&self, p: &[f64], x: f64) -> f64 {
            p[0] * (1.0 - (-p[1] * x).exp())
        }
        fn grad(&self, p: &[f64], x: f64, out: &mut [f64]) {
            let e = (-p[1] * x).exp();
            out[0] = 1.0 - e;
            out[1] = p[0] * x * e;
        }
    }

    /// DanWood: y = b1 x^b2.
    struct DanWood;
    impl Model for DanWood {
        fn n_params(&self) -> usize {
            2
        }
        fn eval(&self, p: &[f64], x: f64) -> f64 {
            p[0] * x.powf(p[1])
        }
        fn grad(&self, p: &[f64], x: f64, out: &mut [f64]) {
            let v = x.powf(p[1]);
            out[0] = v;
            out[1] = p[0] * v * x.ln();
        }
    }

    /// Misra1b: y = b1 (1 − (1 + b2 x/2)^(−2)).
    struct Misra1b;
    impl Model for Misra1b {
        fn n_params(&self) -> usize {
            2
        }
        fn eval(&self, p: &[f64], x: f64) -> f64 {
            p[0] * (1.0 - (1.0 + p[1] * x / 2.0).powi(-2))
        }
        fn grad(&self, p: &[f64], x: f64, out: &mut [f64]) {
            let u = 1.0 + p[1] * x / 2.0;
            out[0] = 1.0 - u.powi(-2);
            out[1] = p[0] * x * u.powi(-3);
        }
    }

    /// Misra1d: y = b1 b2 x / (1 + b2 x).
    struct Misra1d;
    impl Model for Misra1d {
        fn n_params(&self) -> usize {
            2
        }
        fn eval(&self, p: &[f64], x: f64) -> f64 {
            p[0] * p[1] * x / (1.0 + p[1] * x)
        }
        fn grad(&self, p: &[f64], x: f64, out: &mut [f64]) {
            let u = 1.0 + p[1] * x;
            out[0] = p[1] * x / u;
            out[1] = p[0] * x / (u * u);
        }
    }

    /// Rat42: y = b1 / (1 + exp(b2 − b3 x)).
    struct Rat42;
    impl Model for Rat42 {
        fn n_params(&self) -> usize {
            3
        }
        fn eval(&self, p: &[f64], x: f64) -> f64 {
            p[0] / (1.0 + (p[1] - p[2] * x).exp())
        }
        fn grad(&self, p: &[f64], x: f64, out: &mut [f64]) {
            let e = (p[1] - p[2] * x).exp();
            let u = 1.0 + e;
            out[0] = 1.0 / u;
            out[1] = -p[0] * e / (u * u);
            out[2] = p[0] * x * e / (u * u);
        }
    }

    /// MGH09: y = b1 (x² + x b2) / (x² + x b3 + b4).
    struct Mgh09;
    impl Model for Mgh09 {
        fn n_params(&self) -> usize {
            4
        }
        fn eval(&self, p: &[f64], x: f64) -> f64 {
            p[0] * (x * x + x * p[1]) / (x * x + x * p[2] + p[3])
        }
        fn grad(&self, p: &[f64], x: f64, out: &mut [f64]) {
            let num = x * x + x * p[1];
            let den = x * x + x * p[2] + p[3];
            out[0] = num / den;
            out[1] = p[0] * x / den;
            out[2] = -p[0] * num * x / (den * den);
            out[3] = -p[0] * num / (den * den);
        }
    }

    /// Thurber: y = (b1 + b2 x + b3 x² + b4 x³) / (1 + b5 x + b6 x² + b7 x³).
    struct Thurber;
    impl Model for Thurber {
        fn n_params(&self) -> usize {
            7
        }
        fn eval(&self, p: &[f64], x: f64) -> f64 {
            let num = p[0] + x * (p[1] + x * (p[2] + x * p[3]));
            let den = 1.0 + x * (p[4] + x * (p[5] + x * p[6]));
            num / den
        }
        fn grad(&self, p: &[f64], x: f64, out: &mut [f64]) {
            let num = p[0] + x * (p[1] + x * (p[2] + x * p[3]));
            let den = 1.0 + x * (p[4] + x * (p[5] + x * p[6]));
            let powers = [1.0, x, x * x, x * x * x];
            for k in 0..4 {
                out[k] = powers[k] / den;
            }
            for k in 1..4 {
                out[3 + k] = -num * powers[k] / (den * den);
            }
        }
    }

    /// Eckerle4: y = (b1/b2) exp(−½ ((x − b3)/b2)²).
    struct Eckerle4;
    impl Model for Eckerle4 {
        fn n_params(&self) -> usize {
            3
        }
        fn eval(&self, p: &[f64], x: f64) -> f64 {
            let z = (x - p[2]) / p[1];
            p[0] / p[1] * (-0.5 * z * z).exp()
        }
        fn grad(&self, p: &[f64], x: f64, out: &mut [f64]) {
            let z = (x - p[2]) / p[1];
            let e = (-0.5 * z * z).exp();
            out[0] = e / p[1];
            out[1] = p[0] * e * (z * z - 1.0) / (p[1] * p[1]);
            out[2] = p[0] * e * z / (p[1] * p[1]);
        }
    }

    // NIST StRD (https://www.itl.nist.gov/div898/strd/nls/), files in
    // shared/reference-data/nist/. Required: parameters ≥ 6 significant digits, standard
    // deviations ≥ 3, residual sum of squares ≥ 6. Asserted (tighter, as achieved from both
    // starts): parameters ≥ 8, standard deviations ≥ 7.5, RSS ≥ 10 significant digits.

    #[test]
    fn nist_misra1a_both_starts() {
        // Source: NIST StRD Misra1a.dat (lower difficulty).
        run_nist("Misra1a", &Misra1a, 8.0, 7.5, 10.0);
    }

    #[test]
    fn nist_danwood_both_starts() {
        // Source: NIST StRD DanWood.dat (lower difficulty).
        run_nist("DanWood", &DanWood, 8.0, 7.5, 10.0);
    }

    #[test]
    fn nist_misra1b_both_starts() {
        // Source: NIST StRD Misra1b.dat (lower difficulty).
        run_nist("Misra1b", &Misra1b, 8.0, 7.5, 10.0);
    }

    #[test]
    fn nist_misra1d_both_starts() {
        // Source: NIST StRD Misra1d.dat (average difficulty).
        run_nist("Misra1d", &Misra1d, 8.0, 7.5, 10.0);
    }

    #[test]
    fn nist_rat42_both_starts() {
        // Source: NIST StRD Rat42.dat (higher difficulty).
        run_nist("Rat42", &Rat42, 8.0, 7.5, 10.0);
    }

    // Higher-difficulty sets. Both certified starts converge to the certified solution, so
    // both are asserted. Achieved (min over parameters; this engine, x86-64 release build):
    // MGH09 start 1 / 2: parameters 7.1 / 7.2, standard deviations 7.2 / 7.3, RSS 11.6;
    // Thurber: parameters 7.8 / 8.2, standard deviations 7.2 / 7.6, RSS 11.2;
    // Eckerle4: parameters 9.7 / 9.6, standard deviations 9.7 / 9.6, RSS 10.7.
    // Asserted with about half a digit of margin below that, and always at or above the
    // required 6 / 3 / 6.

    #[test]
    fn nist_mgh09_both_starts() {
        // Source: NIST StRD MGH09.dat (higher difficulty; start 1 is far from the solution
        // and takes about 500 evaluations).
        run_nist("MGH09", &Mgh09, 6.5, 6.5, 10.0);
    }

    #[test]
    fn nist_thurber_both_starts() {
        // Source: NIST StRD Thurber.dat (higher difficulty, 7 parameters).
        run_nist("Thurber", &Thurber, 7.5, 6.5, 10.0);
    }

    #[test]
    fn nist_eckerle4_both_starts() {
        // Source: NIST StRD Eckerle4.dat (higher difficulty).
        run_nist("Eckerle4", &Eckerle4, 9.0, 9.0, 10.0);
    }

    #[test]
    fn censored_residual_is_one_sided() {
        // A constant model f = p0 with one ordinary point at 1 and a lower bound at 0.5
        // (inactive at the optimum p0 = 1) and one at 3 (active, pulls p0 up).
        struct Constant;
        impl Model for Constant {
            fn n_params(&self) -> usize {
                1
            }
            fn eval(&self, p: &[f64], _x: f64) -> f64 {
                p[0]
            }
            fn grad(&self, _p: &[f64], _x: f64, out: &mut [f64]) {
                out[0] = 1.0;
            }
        }
        let mut obs = vec![
            Observation::unit(0.0, 1.0),
            Observation {
                x: 1.0,
                y: 0.5,
                weight: 1.0,
                lower_bound_only: true,
            },
        ];
        let fit = least_squares(&Constant, &obs, &[0.0]).unwrap();
        assert!((fit.params[0] - 1.0).abs() < 1e-10, "{fit:?}");
        assert!(fit.rss < 1e-20);
        obs[1].y = 3.0;
        let fit = least_squares(&Constant, &obs, &[0.0]).unwrap();
        // min (p−1)² + (p−3)² → p = 2 (exact algebra).
        assert!((fit.params[0] - 2.0).abs() < 1e-10, "{fit:?}");
        assert!((fit.rss - 2.0).abs() < 1e-10);
    }

    #[test]
    fn bad_inputs_are_errors() {
        let obs = vec![Observation::unit(1.0, 1.0), Observation::unit(2.0, 2.0)];
        assert!(matches!(
            least_squares(&DanWood, &obs, &[1.0]),
            Err(CurveError::StartLength { .. })
        ));
        assert!(matches!(
            least_squares(&DanWood, &obs, &[1.0, f64::NAN]),
            Err(CurveError::NonFiniteStart { .. })
        ));
        assert!(matches!(
            least_squares(&DanWood, &[], &[1.0, 1.0]),
            Err(CurveError::NoObservations)
        ));
        let mut bad = obs.clone();
        bad[1].weight = 0.0;
        assert!(matches!(
            least_squares(&DanWood, &bad, &[1.0, 1.0]),
            Err(CurveError::InvalidObservation { index: 1, .. })
        ));
        let neg = vec![Observation::unit(-1.0, 1.0), Observation::unit(2.0, 2.0)];
        assert!(matches!(
            least_squares(&DanWood, &neg, &[1.0, 0.5]),
            Err(CurveError::ModelNotFiniteAtStart { .. })
        ));
    }

    #[test]
    fn singular_jacobian_gives_no_std_errors() {
        // Two identical columns: f = p0 x + p1 x.
        struct Twin;
        impl Model for Twin {
            fn n_params(&self) -> usize {
                2
            }
            fn eval(&self, p: &[f64], x: f64) -> f64 {
                (p[0] + p[1]) * x
            }
            fn grad(&self, _p: &[f64], x: f64, out: &mut [f64]) {
                out[0] = x;
                out[1] = x;
            }
        }
        let obs: Vec<_> = (1..6)
            .map(|i| Observation::unit(i as f64, 2.0 * i as f64 + 0.01 * (i % 2) as f64))
            .collect();
        let fit = least_squares(&Twin, &obs, &[0.5, 0.5]).unwrap();
        assert!(fit.std_errors.is_none());
        // m <= p gives None too.
        let fit = least_squares(&DanWood, &obs[..2], &[1.0, 1.0]).unwrap();
        assert!(fit.std_errors.is_none());
    }
}
