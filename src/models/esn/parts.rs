//! What a trained echo state network is made of — recurrent matrix as applied, input matrix,
//! bias, leak rate, feature definition, standardisation and readout — in memory
//! ([`Esn::parts`]) and written to a folder as `.npy` arrays with a JSON manifest ([`export`]),
//! so that an independent implementation can rebuild its features from the training data and
//! solve its readout again.

use super::{Esn, SpectralScaling, ValidEsnParams};
use crate::data::{write_npy, DataError};
use crate::models::ridge::export::{
    create_dir, write_manifest, write_readout, ReadoutFit, EXPORT_SCHEMA,
};
use crate::models::FitSummary;
use ndarray::{Array1, Array2};
use serde::Serialize;
use std::path::Path;

/// The parts of a trained echo state network with D units, d inputs and outputs.
///
/// With u(t) = (x(t) − mean) / scale the standardised state and r(0) = 0:
/// r(t + 1) = (1 − α) r(t) + α tanh(W r(t) + W_in u(t) + b); the features after the step with
/// u(t) are φ = [1, r_0, …, r_{D−1}, r_0², …, r_{h−1}²] with h = ⌊D/2⌋ (the squares of the
/// first half of the units, in unit order), and the prediction is û(t + 1) = u(t) + W_out φ.
#[derive(Debug, Clone, PartialEq)]
pub struct EsnParts {
    /// W, D × D, as applied (after the spectral scaling).
    pub recurrent: Array2<f64>,
    /// How W was scaled to its spectral radius.
    pub spectral: SpectralScaling,
    /// W_in, D × d.
    pub input: Array2<f64>,
    /// b, D.
    pub bias: Array1<f64>,
    /// α.
    pub leak_rate: f64,
    /// The units whose squares are features, in feature order.
    pub squared_units: Vec<usize>,
    /// Standardisation: u = (x − mean) / scale.
    pub mean: Vec<f64>,
    pub scale: Vec<f64>,
    /// W_out, d × (1 + D + h).
    pub readout: Array2<f64>,
}

impl Esn {
    /// This network's parts (the recurrent matrix as a dense array).
    pub fn parts(&self) -> EsnParts {
        let res = &*self.reservoir;
        let n = res.size;
        let mut recurrent = Array2::zeros((n, n));
        for i in 0..n {
            for k in res.row_start[i]..res.row_start[i + 1] {
                recurrent[[i, res.col[k]]] = res.val[k];
            }
        }
        let features = res.features();
        EsnParts {
            recurrent,
            spectral: res.radius,
            input: Array2::from_shape_vec((n, res.inputs), res.w_in.clone())
                .expect("units × inputs"),
            bias: Array1::from(res.bias.clone()),
            leak_rate: res.leak,
            squared_units: (0..res.squared_units()).collect(),
            mean: self.mean.clone(),
            scale: self.scale.clone(),
            readout: Array2::from_shape_vec(
                (self.readout.len() / features, features),
                self.readout.clone(),
            )
            .expect("outputs × features"),
        }
    }
}

/// The manifest of an exported echo state network (`model.json`).
#[derive(Serialize)]
#[serde(rename_all = "kebab-case")]
struct Manifest<'a> {
    schema: &'static str,
    family: &'static str,
    update: &'static str,
    features: &'static str,
    units: usize,
    inputs: usize,
    leak_rate: f64,
    degree: usize,
    spectral_radius: SpectralScaling,
    squared_units: &'a [usize],
    files: Files,
    readout: ReadoutFit,
}

#[derive(Serialize)]
#[serde(rename_all = "kebab-case")]
struct Files {
    recurrent: &'static str,
    input: &'static str,
    bias: &'static str,
    mean: &'static str,
    scale: &'static str,
}

/// Writes `esn`, fitted with `params` as `summary` records, into `dir` (created): its manifest
/// `model.json` (settings, feature definition, spectral scaling, the units squared, the fit of
/// the readout: samples, pairs, washout, penalty as applied) and the arrays `recurrent.npy`
/// (D × D, dense), `input.npy` (D × d), `bias.npy`, `mean.npy`, `scale.npy` and `readout.npy`
/// (d × features), as [`EsnParts`] describes them.
pub fn export(
    esn: &Esn,
    params: &ValidEsnParams,
    summary: &FitSummary,
    dir: &Path,
) -> Result<(), DataError> {
    let p = params.get();
    let parts = esn.parts();
    create_dir(dir)?;
    write_npy(&dir.join("recurrent.npy"), &parts.recurrent)?;
    write_npy(&dir.join("input.npy"), &parts.input)?;
    write_npy(&dir.join("bias.npy"), &parts.bias)?;
    write_readout(
        dir,
        &esn.readout,
        parts.readout.nrows(),
        &parts.mean,
        &parts.scale,
    )?;
    let penalty = p.penalty();
    write_manifest(
        dir,
        &Manifest {
            schema: EXPORT_SCHEMA,
            family: "esn",
            update: "r(t + 1) = (1 − leak-rate) r(t) + leak-rate · tanh(W r(t) + W_in u(t) + b), \
                     r(0) = 0, u(t) = (x(t) − mean) / scale",
            features: "φ(t) = [1, r_0 … r_{D−1}, r_i² for i in squared-units] of the state after \
                       the step with u(t); û(t + 1) = u(t) + W_out φ(t)",
            units: parts.recurrent.nrows(),
            inputs: parts.input.ncols(),
            leak_rate: parts.leak_rate,
            degree: p.degree,
            spectral_radius: parts.spectral,
            squared_units: &parts.squared_units,
            files: Files {
                recurrent: "recurrent.npy",
                input: "input.npy",
                bias: "bias.npy",
                mean: "mean.npy",
                scale: "scale.npy",
            },
            readout: ReadoutFit::new(summary, &penalty, p.washout),
        },
    )
}

#[cfg(test)]
mod tests {
    use super::super::{fit_nested, EsnParams};
    use crate::models::test_support::lorenz96;
    use crate::models::Forecaster;

    /// The parts rebuild the network's forecast: a reservoir stepped by hand with the dense
    /// matrices and the features [1, r, r² of the first half] predicts the same first lead as
    /// the network (to round-off: the sums run in another order).
    #[test]
    fn parts_rebuild_the_forecast() {
        let data = lorenz96(900, 3);
        let p = EsnParams {
            reservoir_size: 30,
            washout: 20,
            ..EsnParams::default()
        }
        .check()
        .unwrap();
        let (esn, _) = fit_nested(&p, data.view(), &[800], 4).unwrap().remove(0);
        let parts = esn.parts();
        assert_eq!(parts.squared_units, (0..15).collect::<Vec<_>>());
        assert_eq!(parts.readout.dim(), (8, 1 + 30 + 15));
        assert!(parts.recurrent.iter().filter(|v| **v != 0.0).count() <= 30 * p.get().degree);
        let history = data.slice(ndarray::s![800..=850, ..]);
        let std = |t: usize| -> Vec<f64> {
            (0..8)
                .map(|j| (history[[t, j]] - parts.mean[j]) / parts.scale[j])
                .collect()
        };
        let mut r = ndarray::Array1::<f64>::zeros(30);
        for t in 0..history.nrows() {
            let u = ndarray::Array1::from(std(t));
            let pre = parts.recurrent.dot(&r) + parts.input.dot(&u) + &parts.bias;
            r = r.mapv(|x| (1.0 - parts.leak_rate) * x) + pre.mapv(|x| parts.leak_rate * x.tanh());
        }
        let mut phi = vec![1.0];
        phi.extend(r.iter());
        phi.extend(parts.squared_units.iter().map(|&i| r[i] * r[i]));
        let mut first = Vec::new();
        esn.forecast(history, 1, &mut |_, x| {
            first = x.to_vec();
            false
        });
        let u = std(history.nrows() - 1);
        for j in 0..8 {
            let inc: f64 = parts.readout.row(j).iter().zip(&phi).map(|(w, f)| w * f).sum();
            let x = (u[j] + inc) * parts.scale[j] + parts.mean[j];
            assert!((x - first[j]).abs() < 1e-9 * (1.0 + x.abs()), "{j}: {x} vs {}", first[j]);
        }
    }
}
