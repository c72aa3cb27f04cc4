//! Coarse-graining of gridded fields by a box filter: each coarse cell is the mean of a block of
//! `f₁ × f₂ (× f₃)` fine cells, for integer factors that divide the grid.
//!
//! On a periodic axis the blocks may be shifted by `shift` fine cells (wrapping around), e.g.
//! `shift = f/2` centres the blocks on the fine points `0, f, 2f, …`; on a non-periodic axis the
//! shift must be 0, so every block lies inside the domain. A grid length that the factor does
//! not divide is refused rather than padded or truncated, since either would change what a coarse
//! cell means. The filter keeps the domain mean exactly (each fine cell is counted once).
//!
//! This is the top-hat (box) filter of large-eddy simulation, applied as non-overlapping block
//! averages (common practice; Pope 2000, "Turbulent Flows", section 13.2, for the filter).

use super::dataset::{FieldLayout, SelectionMeta, Snapshots, Span};
use ndarray::{Array2, ArrayView2};

/// Errors from coarse-graining.
#[derive(Debug, thiserror::Error)]
pub enum CoarseError {
    #[error("field '{name}' has {rank} grid dimensions ({dims}), but {factors} coarsening factors are given; give one factor per grid dimension")]
    Rank {
        name: String,
        rank: usize,
        dims: String,
        factors: usize,
    },
    #[error("field '{name}': dimension '{dim}' has {len} points, which the factor {factor} does not divide; choose a factor that divides {len} (or slice the dimension to a multiple of {factor})")]
    NotDivisible {
        name: String,
        dim: String,
        len: usize,
        factor: usize,
    },
    #[error("field '{name}': factor {factor} for dimension '{dim}' must be at least 1")]
    ZeroFactor {
        name: String,
        dim: String,
        factor: usize,
    },
    #[error("field '{name}': dimension '{dim}' is not periodic, so its blocks cannot be shifted (shift {shift}); use shift 0 or declare the dimension periodic")]
    ShiftNotPeriodic {
        name: String,
        dim: String,
        shift: usize,
    },
    #[error("the block has {columns} columns but the grid {shape:?} has {size} points")]
    Size {
        columns: usize,
        shape: Vec<usize>,
        size: usize,
    },
}

/// A box filter onto a coarser regular grid.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CoarseGrain {
    /// One integer factor per grid dimension (C order, as the field's dimensions).
    pub factors: Vec<usize>,
    /// Whether each dimension is periodic; empty means none is.
    pub periodic: Vec<bool>,
    /// Shift of the blocks per dimension, in fine cells (periodic dimensions only); empty means 0.
    pub shift: Vec<usize>,
}

impl CoarseGrain {
    /// Aligned blocks (no shift), periodicity irrelevant.
    pub fn new(factors: &[usize]) -> Self {
        CoarseGrain {
            factors: factors.to_vec(),
            periodic: Vec::new(),
            shift: Vec::new(),
        }
    }

    /// The coarse shape of a field, after checking the factors against it.
    pub fn coarse_shape(
        &self,
        name: &str,
        dims: &[String],
        shape: &[usize],
    ) -> Result<Vec<usize>, CoarseError> {
        if self.factors.len() != shape.len() {
            return Err(CoarseError::Rank {
                name: name.into(),
                rank: shape.len(),
                dims: dims.join(", "),
                factors: self.factors.len(),
            });
        }
        let mut out = Vec::with_capacity(shape.len());
        for (a, (&n, &f)) in shape.iter().zip(&self.factors).enumerate() {
            let dim = dims.get(a).cloned().unwrap_or_else(|| format!("axis{a}"));
            if f == 0 {
                return Err(CoarseError::ZeroFactor {
                    name: name.into(),
                    dim,
                    factor: f,
                });
            }
            if n % f != 0 {
                return Err(CoarseError::NotDivisible {
                    name: name.into(),
                    dim,
                    len: n,
                    factor: f,
                });
            }
            let shift = self.shift.get(a).copied().unwrap_or(0);
            if shift % n.max(1) != 0 && !self.periodic.get(a).copied().unwrap_or(false) {
                return Err(CoarseError::ShiftNotPeriodic {
                    name: name.into(),
                    dim,
                    shift,
                });
            }
            out.push(n / f);
        }
        Ok(out)
    }

    /// For every fine cell (C order), the coarse cell it falls into (C order).
    fn cell_map(&self, shape: &[usize], coarse: &[usize]) -> Vec<u32> {
        let size: usize = shape.iter().product();
        let mut map = Vec::with_capacity(size);
        let mut idx = vec![0usize; shape.len()];
        for _ in 0..size {
            let mut c = 0usize;
            for a in 0..shape.len() {
                let shift = self.shift.get(a).copied().unwrap_or(0);
                let i = (idx[a] + shift) % shape[a];
                c = c * coarse[a] + i / self.factors[a];
            }
            map.push(c as u32);
            for a in (0..shape.len()).rev() {
                idx[a] += 1;
                if idx[a] < shape[a] {
                    break;
                }
                idx[a] = 0;
            }
        }
        map
    }

    /// Filters a block of snapshots of one field (rows × fine cells in C order of `shape`) into
    /// rows × coarse cells.
    pub fn apply(
        &self,
        name: &str,
        dims: &[String],
        shape: &[usize],
        values: ArrayView2<'_, f64>,
    ) -> Result<Array2<f64>, CoarseError> {
        let coarse = self.coarse_shape(name, dims, shape)?;
        let size: usize = shape.iter().product();
        if values.ncols() != size {
            return Err(CoarseError::Size {
                columns: values.ncols(),
                shape: shape.to_vec(),
                size,
            });
        }
        let map = self.cell_map(shape, &coarse);
        let cells: usize = coarse.iter().product();
        let weight = 1.0 / self.factors.iter().product::<usize>() as f64;
        let mut out = Array2::zeros((values.nrows(), cells));
        for (row, mut o) in values.rows().into_iter().zip(out.rows_mut()) {
            let o = o.as_slice_mut().expect("fresh array is contiguous");
            for (&v, &c) in row.iter().zip(&map) {
                o[c as usize] += v;
            }
            o.iter_mut().for_each(|x| *x *= weight);
        }
        Ok(out)
    }
}

/// Coarse-grains every selected field of `snap` with the same filter (fields must all have
/// `filter.factors.len()` grid dimensions); the layout's shapes, columns and spans follow
/// (a coarse span's stride is the fine stride × the factor).
pub fn coarse_grain_snapshots(
    snap: &Snapshots,
    filter: &CoarseGrain,
) -> Result<Snapshots, CoarseError> {
    let (fields, columns) = coarse_layout(&snap.meta.fields, filter)?;
    let mut values = Array2::zeros((snap.values.nrows(), columns));
    for (old, new) in snap.meta.fields.iter().zip(&fields) {
        let part = snap.values.slice(ndarray::s![.., old.columns.clone()]);
        let c = filter.apply(&old.name, &old.dims, &old.shape, part)?;
        values
            .slice_mut(ndarray::s![.., new.columns.clone()])
            .assign(&c);
    }
    Ok(Snapshots {
        values,
        meta: SelectionMeta {
            fields,
            ..snap.meta.clone()
        },
    })
}

/// The field layouts after coarse-graining, and the new number of columns.
pub fn coarse_layout(
    fields: &[FieldLayout],
    filter: &CoarseGrain,
) -> Result<(Vec<FieldLayout>, usize), CoarseError> {
    let mut out = Vec::with_capacity(fields.len());
    let mut col = 0;
    for f in fields {
        let shape = filter.coarse_shape(&f.name, &f.dims, &f.shape)?;
        let size: usize = shape.iter().product();
        let spans = f
            .spans
            .iter()
            .zip(&filter.factors)
            .zip(&shape)
            .map(|((s, &k), &n)| Span {
                start: s.start,
                count: n,
                stride: s.stride * k,
            })
            .collect();
        out.push(FieldLayout {
            shape,
            columns: col..col + size,
            spans,
            ..f.clone()
        });
        col += size;
    }
    Ok((out, col))
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    fn dims(n: usize) -> Vec<String> {
        (0..n).map(|i| format!("d{i}")).collect()
    }

    #[test]
    fn block_means_by_hand_and_the_mean_is_kept() {
        // One 4 × 4 snapshot with values 0..16; 2 × 2 blocks.
        let x = Array2::from_shape_fn((1, 16), |(_, j)| j as f64);
        let c = CoarseGrain::new(&[2, 2])
            .apply("w", &dims(2), &[4, 4], x.view())
            .unwrap();
        // Block (0,0) holds 0, 1, 4, 5.
        assert_eq!(c.row(0).to_vec(), vec![2.5, 4.5, 10.5, 12.5]);
        assert!((c.mean().unwrap() - x.mean().unwrap()).abs() < 1e-12);
        // Periodic shift by 1 along the second axis: block (0,0) holds columns 3, 0 (wrapped
        // into block 0 via (j + 1) % 4 / 2: j = 0 → 0, j = 1 → 1, j = 3 → 0) of rows 0, 1.
        let f = CoarseGrain {
            factors: vec![2, 2],
            periodic: vec![false, true],
            shift: vec![0, 1],
        };
        let c = f.apply("w", &dims(2), &[4, 4], x.view()).unwrap();
        assert_eq!(c[(0, 0)], (0.0 + 3.0 + 4.0 + 7.0) / 4.0);
        assert!((c.mean().unwrap() - x.mean().unwrap()).abs() < 1e-12);
        // A 3-D field 2 × 4 × 6 with factors (2, 2, 3).
        let x3 = Array2::from_shape_fn((2, 48), |(r, j)| (r * 100 + j) as f64);
        let c3 = CoarseGrain::new(&[2, 2, 3])
            .apply("t", &dims(3), &[2, 4, 6], x3.view())
            .unwrap();
        assert_eq!(c3.ncols(), 4);
        // Coarse cell (0,0,0): i in {0,1}, j in {0,1}, k in {0,1,2}: flat 24i + 6j + k.
        let want: f64 = [0, 24]
            .iter()
            .flat_map(|i| [0, 6].map(move |j| i + j))
            .flat_map(|ij| [0, 1, 2].map(move |k| (ij + k) as f64))
            .sum::<f64>()
            / 12.0;
        assert_eq!(c3[(0, 0)], want);
        assert_eq!(c3[(1, 0)], want + 100.0);
    }

    #[test]
    fn sizes_that_do_not_divide_and_bad_shifts_are_refused() {
        let x = Array2::<f64>::zeros((1, 30));
        let e = CoarseGrain::new(&[2, 4])
            .apply("u", &["y".into(), "x".into()], &[5, 6], x.view())
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("'u'") && e.contains("'y'") && e.contains("5 points"),
            "{e}"
        );
        let e = CoarseGrain::new(&[2])
            .apply("u", &dims(2), &[5, 6], x.view())
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("2 grid dimensions") && e.contains("1 coarsening"),
            "{e}"
        );
        let f = CoarseGrain {
            factors: vec![1, 2],
            periodic: vec![],
            shift: vec![0, 1],
        };
        let e = f
            .apply("u", &dims(2), &[5, 6], x.view())
            .unwrap_err()
            .to_string();
        assert!(e.contains("not periodic"), "{e}");
    }
}
