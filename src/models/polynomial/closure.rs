//! The polynomial as the regression of a closure: from a stencil of resolved variables (or all
//! of them) to the coupling term, e.g. the classical cubic or quartic closure U_k(X_k) of the
//! two-scale Lorenz-96 system (Wilks 2005).

use super::fit::{fit_polynomial, Polynomial};
use super::ValidPolynomialParams;
use crate::models::closure::Regressor;
use crate::models::{FitSummary, ModelError};
use ndarray::ArrayView2;
use std::sync::Arc;

impl Regressor for Polynomial {
    fn inputs(&self) -> usize {
        Polynomial::inputs(self)
    }
    fn outputs(&self) -> usize {
        Polynomial::outputs(self)
    }
    fn predict(&self, x: &[f64], out: &mut [f64]) {
        Polynomial::predict(self, x, out)
    }
}

/// Fits the polynomial of a closure on its training rows (inputs → coupling terms) by
/// [`fit_polynomial`]; the summary's `n` is left 0 for the caller.
pub fn fit_regression(
    params: &ValidPolynomialParams,
    rows_in: ArrayView2<f64>,
    rows_out: ArrayView2<f64>,
) -> Result<(Arc<dyn Regressor>, FitSummary), ModelError> {
    let (poly, info) = fit_polynomial(params, rows_in, rows_out)?;
    Ok((
        Arc::new(poly),
        FitSummary {
            n: 0,
            training_pairs: info.rows,
            ridge_penalty: Some(info.penalty),
            training_rmse: Some(info.training_rmse),
            ridge_selection: None,
        },
    ))
}

#[cfg(test)]
mod tests {
    use super::super::tests::params;
    use super::super::fit::{least_squares_qr_multi, PolyFitInfo};
    use super::super::PolynomialParams;
    use super::*;
    use crate::models::closure::{Closure, ClosureInputs, LearnedClosure};
    use crate::models::ridge::RidgeSelection;
    use ndarray::{s, Array1, Array2, Axis};
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A local closure of half-width `half_width` fitted as a study fits it: one polynomial of
    /// the stencil X_(k−s) … X_(k+s) (cyclic in k) for every U_k, on the rows (t, k) of
    /// [`ClosureInputs::rows`].
    fn local(
        p: &ValidPolynomialParams,
        half_width: usize,
        x: ArrayView2<f64>,
        u: ArrayView2<f64>,
    ) -> (Polynomial, PolyFitInfo, LearnedClosure) {
        let inputs = ClosureInputs::Local { half_width };
        let (rows_in, rows_out) = inputs.rows(x, u);
        let (poly, info) = fit_polynomial(p, rows_in.view(), rows_out.view()).unwrap();
        let closure = LearnedClosure {
            regressor: Arc::new(poly.clone()),
            inputs,
        };
        (poly, info, closure)
    }

    /// A closure with half-width 1 recovers U_k = 0.5 + X_{k−1} − 2 X_{k+1} + 0.1 X_k² exactly,
    /// including the cyclic wrap at k = 0 and k = K − 1; its inputs are X_{k−1}, X_k, X_{k+1}.
    #[test]
    fn local_closure_uses_the_cyclic_stencil() {
        let kk = 6;
        let truth = |x: &[f64], k: usize| {
            0.5 + x[(k + kk - 1) % kk] - 2.0 * x[(k + 1) % kk] + 0.1 * x[k] * x[k]
        };
        let mut rng = ChaCha8Rng::seed_from_u64(8);
        let x = Array2::from_shape_fn((30, kk), |_| rng.random_range(-3.0..3.0));
        let u = Array2::from_shape_fn((30, kk), |(t, k)| truth(x.row(t).as_slice().unwrap(), k));
        let p = PolynomialParams {
            degree: 2,
            ..PolynomialParams::default()
        }
        .check()
        .unwrap();
        let (poly, info, closure) = local(&p, 1, x.view(), u.view());
        assert_eq!((info.rows, info.features, poly.inputs()), (180, 10, 3));
        let state: Vec<f64> = (0..kk).map(|_| rng.random_range(-3.0..3.0)).collect();
        let mut out = vec![0.0; kk];
        closure.coupling(0.0, &state, &mut out);
        for (k, o) in out.iter().enumerate() {
            assert!((o - truth(&state, k)).abs() < 1e-10, "k = {k}");
        }
        let mut one = [0.0];
        poly.predict(&[1.0, 2.0, 3.0], &mut one);
        assert!((one[0] - (0.5 + 1.0 - 6.0 + 0.4)).abs() < 1e-10);
    }

    /// Power-series coefficients b_0..b_d in the raw input of a one-input polynomial fitted on
    /// standardised z = (X − μ)/σ: z^k = σ^{−k} Σ_j C(k, j) X^j (−μ)^{k−j}.
    fn power_series(poly: &Polynomial) -> Vec<f64> {
        let d = poly.monomials().degree();
        let (mean, scale) = poly.standardisation();
        let (mu, sigma) = (mean[0], scale[0]);
        let mut b = vec![0.0; d + 1];
        for (k, a) in poly.coefficients().iter().enumerate() {
            let mut binom = 1.0;
            for (j, bj) in b.iter_mut().enumerate().take(k + 1) {
                *bj += a * binom * (-mu).powi((k - j) as i32) / sigma.powi(k as i32);
                binom *= (k - j) as f64 / (j + 1) as f64;
            }
        }
        b
    }

    /// Wilks (2005) closure of the two-scale Lorenz-96 system (K = 8, J = 32, h = 1,
    /// b = c = 10, F = 20): with s = 0, degrees 3 and 4, the fitted parametrisation
    /// g_U(X) = −U(X) (Wilks's convention: subtracted from the resolved tendency) is an
    /// increasing, saturating curve close to the published quartic, and explains most of the
    /// coupling's variance on a later, held-out stretch.
    ///
    /// Published quartic for F = 20, from memory (Wilks 2005, section 3):
    /// g_U(X) = 0.275 + 1.59 X − 0.0190 X² − 0.0130 X³ + 0.000707 X⁴.
    ///
    /// Tolerances are loose because the fits differ: the published curve was fitted (as
    /// recalled) to U estimated from the full model's X tendencies over a time step, from a long
    /// record at another sampling, while this test fits the exact coupling term over 40 time
    /// units sampled every 0.05; the coefficients are recalled, not looked up; and U scatters
    /// about any curve of X alone with a standard deviation of about 1.8. Hence: values within
    /// 2.0 (about one residual standard deviation, some 15% of the curve's range over the bulk)
    /// at X ∈ {−2.5, 0, …, 10}, most of the 5–95% range of X (about −4.5 to 12.4 here); slope
    /// at 0 within 0.7 of the published 1.59 (a cubic cannot steepen near 0 the way the quartic
    /// does); cubic and quartic coefficients of the published signs; held-out R² ≥ 0.75.
    /// Measured over seeds 1–8: largest value gap 1.66 (the cubic at X = −2.5), slope at 0
    /// 1.09–1.13 (cubic) and 1.26–1.29 (quartic), R² 0.835–0.853.
    #[test]
    fn wilks_closure_of_two_scale_lorenz_96() {
        use crate::systems::{simulate, SimulationSpec, SystemSpec};
        let spec = SimulationSpec {
            system: SystemSpec::TwoScaleLorenz96 {
                k: 8,
                j: 32,
                h: 1.0,
                c: 10.0,
                b: 10.0,
                forcing: 20.0,
            },
            dt: 0.005,
            sample_interval: 0.05,
            spin_up: 10.0,
            samples: 1200,
            seed: 7,
        };
        let sim = simulate(&spec, None).unwrap();
        let (x, u) = (sim.resolved, sim.subgrid.unwrap());
        let train = 800;
        let published =
            |v: f64| 0.275 + 1.59 * v - 0.0190 * v * v - 0.0130 * v.powi(3) + 0.000707 * v.powi(4);
        for degree in [3, 4] {
            let p = params(degree, 0.0, RidgeSelection::Fixed);
            let (poly, info, closure) =
                local(&p, 0, x.slice(s![..train, ..]), u.slice(s![..train, ..]));
            let g = |v: f64| {
                let mut out = [0.0];
                poly.predict(&[v], &mut out);
                -out[0]
            };
            // Wilks's convention: g_U = −U.
            let b: Vec<f64> = power_series(&poly).iter().map(|c| -c).collect();
            eprintln!(
                "degree {degree}: g_U coefficients {b:.5?}, training RMSE {:.3}",
                info.training_rmse
            );
            // The expansion is the same least-squares fit as QR on raw powers of X.
            let design = Array2::from_shape_fn((train * 8, degree + 1), |(i, j)| {
                x[[i / 8, i % 8]].powi(j as i32)
            });
            let target = Array1::from_shape_fn(train * 8, |i| -u[[i / 8, i % 8]]);
            let raw = least_squares_qr_multi(design.view(), target.view().insert_axis(Axis(1)))
                .unwrap()
                .remove_axis(Axis(1));
            for (a, r) in b.iter().zip(&raw) {
                assert!((a - r).abs() < 1e-6 * r.abs().max(1e-3), "{b:?} vs {raw}");
            }
            for v in [-2.5, 0.0, 2.5, 5.0, 7.5, 10.0] {
                let (got, want) = (g(v), published(v));
                eprintln!("  g_U({v}) = {got:.3}, published {want:.3}");
                assert!((got - want).abs() < 2.0, "degree {degree}, X = {v}");
            }
            let slope = |v: f64| (g(v + 1e-3) - g(v - 1e-3)) / 2e-3;
            assert!((slope(0.0) - 1.59).abs() < 0.7, "slope {}", slope(0.0));
            assert!((slope(0.0) - b[1]).abs() < 1e-6);
            assert!(b[3] < 0.0 && (degree < 4 || b[4] > 0.0), "{b:?}");
            // Shape: increasing over the bulk of X, flattening at large X.
            for i in 0..=28 {
                let v = -4.0 + 0.5 * i as f64;
                assert!(slope(v) > 0.0, "degree {degree}: slope {} at {v}", slope(v));
            }
            assert!(slope(10.0) < 0.5 * slope(0.0));
            let held = u.slice(s![train.., ..]);
            let mean = held.mean().unwrap();
            let (mut sse, mut sst) = (0.0, 0.0);
            let mut pred = vec![0.0; 8];
            for t in train..x.nrows() {
                closure.coupling(0.0, x.row(t).as_slice().unwrap(), &mut pred);
                for k in 0..8 {
                    sse += (pred[k] - u[[t, k]]).powi(2);
                    sst += (u[[t, k]] - mean).powi(2);
                }
            }
            let r2 = 1.0 - sse / sst;
            eprintln!("  held-out R² {r2:.3}");
            assert!(r2 > 0.75, "degree {degree}: held-out R² {r2}");
        }
    }
}
