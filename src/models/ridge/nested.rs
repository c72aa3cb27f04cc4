//! The nested pass: one loop over the rows of a ridge problem that yields the normal equations
//! of every prefix of it, so a whole learning curve (a readout per nested subset size) costs
//! about one fit at the largest size. Every ridge-readout family runs this loop; a family only
//! says how to write its rows ([`RowSource`]) and where its prefixes end (in rows).
//!
//! The invariant the loop owns: the equations of a prefix are the same bit for bit whatever
//! other prefixes the pass evaluates (see [`BLOCK_ROWS`]), so a point of a study is reproduced
//! exactly when it is computed again with other subset sizes, on another shard or after new
//! sizes were added.

use super::normal::NormalEquations;
use super::penalty::{fit_readout, forecast_readout, Penalty, Readout, RidgeSelection};
use crate::models::{FitSummary, ModelError};
use faer::MatRef;

/// Rows per Gram update: large enough for efficient matrix products, small enough to stay in cache.
///
/// The nested pass adds full blocks at fixed positions, counted from the first row, and
/// evaluates a prefix that ends inside a block from a copy of the equations with the partial
/// block added ([`NormalEquations::with_rows`]), which keeps filling; the block the last prefix
/// ends in is added once that prefix is in, as nothing follows it. The equations of a prefix
/// are therefore summed in the same order, bit for bit, whatever other prefixes the pass
/// evaluates. The price is the Gram work of the partial block at every boundary but the last (at
/// most `BLOCK_ROWS` − 1 rows each) and one copy of the equations.
pub const BLOCK_ROWS: usize = 1024;

/// How a block stores its features.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Layout {
    /// Feature j of row i at j · [`BLOCK_ROWS`] + i: each feature's values contiguous.
    /// Measured: such blocks accumulate about 1.8× faster than row-major ones (41 vs 22.5
    /// GFLOP/s at 901 features, `cargo bench --bench hot_paths`).
    ColumnMajor,
    /// The features of row i at i · F … (i + 1) · F − 1.
    RowMajor,
}

/// Up to [`BLOCK_ROWS`] rows on their way into the equations: features in the source's
/// [`Layout`], targets row-major (target k of row i at i · outputs + k).
pub struct Block {
    layout: Layout,
    features: usize,
    outputs: usize,
    phi: Vec<f64>,
    y: Vec<f64>,
}

impl Block {
    fn new(layout: Layout, features: usize, outputs: usize) -> Self {
        Self {
            layout,
            features,
            outputs,
            phi: vec![0.0; BLOCK_ROWS * features],
            y: vec![0.0; BLOCK_ROWS * outputs],
        }
    }

    /// Writes row `i` of the block: its `features` values `phi` and `outputs` values `y`.
    #[inline]
    pub fn set_row(&mut self, i: usize, phi: &[f64], y: &[f64]) {
        let (f, d) = (self.features, self.outputs);
        debug_assert!(i < BLOCK_ROWS && phi.len() == f && y.len() == d);
        match self.layout {
            Layout::ColumnMajor => {
                for (j, v) in phi.iter().enumerate() {
                    self.phi[j * BLOCK_ROWS + i] = *v;
                }
            }
            Layout::RowMajor => self.phi[i * f..(i + 1) * f].copy_from_slice(phi),
        }
        self.y[i * d..(i + 1) * d].copy_from_slice(y);
    }

    /// A column-major block's storage, for sources that write feature by feature: feature j of
    /// row i at `columns[j * BLOCK_ROWS + i]`, target k of row i at `targets[i * outputs + k]`.
    ///
    /// # Panics
    /// If the block is row-major.
    pub fn columns_mut(&mut self) -> (&mut [f64], &mut [f64]) {
        assert_eq!(self.layout, Layout::ColumnMajor, "a column-major block");
        (&mut self.phi, &mut self.y)
    }

    /// The first `rows` rows as matrices (rows × features, rows × outputs).
    fn rows(&self, rows: usize) -> (MatRef<'_, f64>, MatRef<'_, f64>) {
        let (f, d) = (self.features, self.outputs);
        let phi = match self.layout {
            Layout::ColumnMajor => {
                MatRef::from_column_major_slice_with_stride(&self.phi, rows, f, BLOCK_ROWS)
            }
            Layout::RowMajor => MatRef::from_row_major_slice(&self.phi[..rows * f], rows, f),
        };
        (
            phi,
            MatRef::from_row_major_slice(&self.y[..rows * d], rows, d),
        )
    }
}

/// Rows a source writes in one call: rows `first`, `first + 1`, … of the problem into positions
/// `start .. end` of the block.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rows {
    pub first: usize,
    pub start: usize,
    pub end: usize,
}

impl Rows {
    /// (position in the block, row of the problem) of every row, in order.
    pub fn each(self) -> impl Iterator<Item = (usize, usize)> {
        (self.start..self.end).map(move |i| (i, self.first + i - self.start))
    }
}

/// The rows of one ridge problem, written on demand: features φ and targets y, row r of the
/// problem being the r-th training pair (or row) after any washout.
pub trait RowSource {
    /// Features per row.
    fn features(&self) -> usize;

    /// Targets per row.
    fn outputs(&self) -> usize;

    /// How the source's blocks store features (column-major unless said otherwise).
    fn layout(&self) -> Layout {
        Layout::ColumnMajor
    }

    /// Writes `rows` into `block`. The pass asks for every row exactly once, in order, so a source may advance a
    /// state as it goes (a reservoir); an error (a state that turned non-finite) ends the pass.
    fn fill(&mut self, block: &mut Block, rows: Rows) -> Result<(), ModelError>;
}

/// The nested pass: accumulates the rows of `source` into streaming normal equations and calls
/// `on_boundary(i, ne)` once the first `boundaries[i]` rows are in, for every i (`boundaries`
/// ascending; a repeated value is reported once per repetition). Returns the equations of the
/// largest boundary (all rows the pass read).
///
/// Blocks of [`BLOCK_ROWS`] rows sit at fixed positions from the first row and a boundary inside
/// a block sees a copy with the partial block added, so the equations at a boundary are the
/// same bit for bit whatever the other boundaries are (see [`BLOCK_ROWS`]).
pub fn nested_pass(
    source: &mut dyn RowSource,
    boundaries: &[usize],
    on_boundary: &mut dyn FnMut(usize, &NormalEquations) -> Result<(), ModelError>,
) -> Result<NormalEquations, ModelError> {
    let (f, d) = (source.features(), source.outputs());
    let mut ne = NormalEquations::zeros(f, d);
    let Some(&last) = boundaries.last() else {
        return Ok(ne);
    };
    debug_assert!(
        boundaries.windows(2).all(|w| w[0] <= w[1]),
        "boundaries ascending"
    );
    let mut block = Block::new(source.layout(), f, d);
    // Rows read so far, and how many of them wait in the block.
    let (mut done, mut filled) = (0, 0);
    for (i, &end) in boundaries.iter().enumerate() {
        while done < end {
            let upto = BLOCK_ROWS.min(filled + (end - done));
            let rows = Rows {
                first: done,
                start: filled,
                end: upto,
            };
            source.fill(&mut block, rows)?;
            done += upto - filled;
            filled = upto;
            // A block joins the equations when full or when no row follows (then no copy is
            // made at the last boundary).
            if filled == BLOCK_ROWS || done == last {
                let (phi, y) = block.rows(filled);
                ne.add(phi, y);
                filled = 0;
            }
        }
        let (phi, y) = block.rows(filled);
        on_boundary(i, &ne.with_rows(phi, y))?;
    }
    debug_assert_eq!(filled, 0, "the last row closes the last block");
    Ok(ne)
}

/// Scores a candidate readout (its weights, outputs × features) by its forecasts: higher is
/// better.
pub type ReadoutScore<'a> = &'a mut dyn FnMut(&[f64]) -> f64;

/// The nested pass with a readout solved at every boundary: for subset size `sizes[i]`, whose
/// rows are `rows(sizes[i])`, the readout by `penalty` and its fit summary (a failed solve names
/// the size). Results in the order of `sizes` (ascending). Forecast selection scores its
/// candidates with `score` (an error without it).
pub fn nested_readouts(
    source: &mut dyn RowSource,
    sizes: &[usize],
    rows: impl Fn(usize) -> usize,
    penalty: &Penalty,
    mut score: Option<ReadoutScore>,
) -> Result<Vec<(Readout, FitSummary)>, ModelError> {
    let boundaries: Vec<usize> = sizes.iter().map(|&n| rows(n)).collect();
    let mut out = Vec::with_capacity(sizes.len());
    nested_pass(source, &boundaries, &mut |i, ne| {
        let size = sizes[i];
        let solved = match (penalty.selection, score.as_mut()) {
            (RidgeSelection::Forecast, Some(score)) => forecast_readout(ne, *score),
            _ => fit_readout(ne, penalty),
        };
        let readout = solved.map_err(|source| ModelError::Ridge { size, source })?;
        let summary = readout.summary(size, ne.count);
        out.push((readout, summary));
        Ok(())
    })?;
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::super::test_problems::random_problem;
    use super::*;

    /// Rows stored in memory (row-major), written row by row in the given layout, or column by
    /// column (column-major only); records every request.
    struct Stored {
        phi: Vec<f64>,
        y: Vec<f64>,
        f: usize,
        d: usize,
        layout: Layout,
        by_columns: bool,
        asked: Vec<(usize, usize, usize)>,
    }

    impl Stored {
        fn new(rows: usize, f: usize, d: usize, layout: Layout, by_columns: bool) -> Self {
            let (phi, y) = random_problem(rows, f, d, 91);
            Self {
                phi,
                y,
                f,
                d,
                layout,
                by_columns,
                asked: Vec::new(),
            }
        }

        /// The equations of the first `rows` rows, added in one call.
        fn added_at_once(&self, rows: usize) -> NormalEquations {
            let mut ne = NormalEquations::zeros(self.f, self.d);
            ne.add_rows(&self.phi[..rows * self.f], &self.y[..rows * self.d], rows);
            ne
        }
    }

    impl RowSource for Stored {
        fn features(&self) -> usize {
            self.f
        }
        fn outputs(&self) -> usize {
            self.d
        }
        fn layout(&self) -> Layout {
            self.layout
        }
        fn fill(&mut self, block: &mut Block, rows: Rows) -> Result<(), ModelError> {
            let Rows { first, start, end } = rows;
            self.asked.push((first, start, end));
            let (f, d) = (self.f, self.d);
            if self.by_columns {
                let (columns, targets) = block.columns_mut();
                for j in 0..f {
                    for (i, r) in rows.each() {
                        columns[j * BLOCK_ROWS + i] = self.phi[r * f + j];
                    }
                }
                for (i, r) in rows.each() {
                    targets[i * d..(i + 1) * d].copy_from_slice(&self.y[r * d..(r + 1) * d]);
                }
            } else {
                for (i, r) in rows.each() {
                    block.set_row(
                        i,
                        &self.phi[r * f..(r + 1) * f],
                        &self.y[r * d..(r + 1) * d],
                    );
                }
            }
            Ok(())
        }
    }

    /// Every boundary's equations, from one pass.
    fn pass(source: &mut Stored, boundaries: &[usize]) -> Vec<NormalEquations> {
        let mut out = Vec::new();
        let last = nested_pass(source, boundaries, &mut |_, ne| {
            out.push(ne.clone());
            Ok(())
        })
        .unwrap();
        if let Some(top) = out.last() {
            assert_bits(&last, top, "returned equations");
        }
        out
    }

    #[track_caller]
    fn assert_bits(a: &NormalEquations, b: &NormalEquations, what: &str) {
        use crate::models::test_support::assert_bits_eq;
        let f = a.features();
        let lower = |ne: &NormalEquations| -> Vec<f64> {
            (0..f)
                .flat_map(|j| (j..f).map(move |i| (i, j)))
                .map(|(i, j)| ne.gram[(i, j)])
                .collect()
        };
        let cross = |ne: &NormalEquations| -> Vec<f64> {
            (0..ne.outputs())
                .flat_map(|k| (0..f).map(move |i| (i, k)))
                .map(|(i, k)| ne.cross[(i, k)])
                .collect()
        };
        assert_eq!(a.count, b.count, "{what}: rows");
        assert_bits_eq(&lower(a), &lower(b), &format!("{what}: Gram"));
        assert_bits_eq(&cross(a), &cross(b), &format!("{what}: cross"));
        assert_bits_eq(&a.target_sq, &b.target_sq, &format!("{what}: Σy²"));
    }

    const BOUNDARIES: [usize; 8] = [1, 700, 1024, 1500, 2048, 2049, 2049, 3100];

    /// The equations at every boundary equal those of the same rows added in one call, to
    /// round-off (a sum in another order: tolerance 1e-12 per row of the largest magnitude,
    /// entries here being at most 1 in size), in both layouts and written row by row or column
    /// by column; the pass asks for each row once, in order, and never across a block end.
    #[test]
    fn prefix_equations_equal_those_from_scratch() {
        let (rows, f, d) = (3100, 9, 2);
        for (layout, by_columns) in [
            (Layout::ColumnMajor, false),
            (Layout::ColumnMajor, true),
            (Layout::RowMajor, false),
        ] {
            let mut source = Stored::new(rows, f, d, layout, by_columns);
            let all = pass(&mut source, &BOUNDARIES);
            assert_eq!(all.len(), BOUNDARIES.len());
            let mut next = 0;
            for &(first, start, end) in &source.asked {
                assert_eq!(first, next, "rows in order, each once");
                assert_eq!(first % BLOCK_ROWS, start, "fixed block positions");
                assert!(start < end && end <= BLOCK_ROWS);
                next += end - start;
            }
            assert_eq!(next, rows);
            for (ne, &n) in all.iter().zip(&BOUNDARIES) {
                let direct = source.added_at_once(n);
                assert_eq!(ne.count, n);
                let tol = 1e-12 * n as f64;
                for i in 0..f {
                    for j in 0..=i {
                        assert!((ne.gram[(i, j)] - direct.gram[(i, j)]).abs() <= tol);
                    }
                    for k in 0..d {
                        assert!((ne.cross[(i, k)] - direct.cross[(i, k)]).abs() <= tol);
                    }
                }
                for (a, b) in ne.target_sq.iter().zip(&direct.target_sq) {
                    assert!((a - b).abs() <= tol, "{layout:?} n {n}: {a} vs {b}");
                }
            }
        }
    }

    /// The equations at a boundary are the same bit for bit whatever other boundaries the pass
    /// evaluates (alone, with others inside the same block, at block ends, repeated), and
    /// whether the source writes rows or columns.
    #[test]
    fn equations_at_a_boundary_do_not_depend_on_the_other_boundaries() {
        let (rows, f, d) = (3100, 7, 3);
        for layout in [Layout::ColumnMajor, Layout::RowMajor] {
            let mut source = Stored::new(rows, f, d, layout, false);
            let all = pass(&mut source, &BOUNDARIES);
            let lists: Vec<Vec<usize>> = vec![
                vec![1500],
                vec![700, 1500],
                vec![1, 3100],
                vec![2049],
                vec![1024, 2048, 3100],
                vec![1499, 1500, 1501],
                vec![3100],
            ];
            for list in lists {
                let mut other = Stored::new(rows, f, d, layout, false);
                for (ne, n) in pass(&mut other, &list).iter().zip(&list) {
                    let i = BOUNDARIES.iter().position(|b| b == n);
                    let reference = match i {
                        Some(i) => all[i].clone(),
                        None => pass(&mut Stored::new(rows, f, d, layout, false), &[*n]).remove(0),
                    };
                    assert_bits(ne, &reference, &format!("{layout:?} n {n} with {list:?}"));
                }
            }
        }
        let mut by_rows = Stored::new(rows, f, d, Layout::ColumnMajor, false);
        let mut by_columns = Stored::new(rows, f, d, Layout::ColumnMajor, true);
        for (a, b) in pass(&mut by_rows, &BOUNDARIES)
            .iter()
            .zip(&pass(&mut by_columns, &BOUNDARIES))
        {
            assert_bits(a, b, "rows against columns");
        }
    }

    /// No boundaries read nothing; a boundary at 0 rows sees empty equations; a source error
    /// ends the pass with that error.
    #[test]
    fn empty_boundaries_and_source_errors() {
        let mut source = Stored::new(10, 3, 1, Layout::ColumnMajor, false);
        let ne = nested_pass(&mut source, &[], &mut |_, _| panic!("no boundary")).unwrap();
        assert_eq!(ne.count, 0);
        assert!(source.asked.is_empty());
        let zero = pass(&mut source, &[0, 4]);
        assert_eq!((zero[0].count, zero[1].count), (0, 4));

        struct Failing;
        impl RowSource for Failing {
            fn features(&self) -> usize {
                2
            }
            fn outputs(&self) -> usize {
                1
            }
            fn fill(&mut self, _: &mut Block, rows: Rows) -> Result<(), ModelError> {
                Err(ModelError::NonFinite { step: rows.first })
            }
        }
        let e = nested_pass(&mut Failing, &[5], &mut |_, _| panic!("no boundary")).unwrap_err();
        assert!(matches!(e, ModelError::NonFinite { step: 0 }), "{e}");
    }
}
