//! Blocks of rows at fixed positions: the layout the nested passes of the ridge-readout
//! families accumulate their normal equations in.

use faer::MatRef;

/// Rows per Gram update: large enough for efficient matrix products, small enough to stay in cache.
///
/// The nested passes add full blocks at fixed positions, counted from the first training pair
/// (or row), and evaluate a prefix that ends inside a block from a copy of the equations with
/// the partial block added ([`NormalEquations::with_rows`](super::NormalEquations::with_rows)), which keeps filling; the block the
/// last prefix ends in is added once that prefix is in, as nothing follows it. The equations of
/// a prefix are therefore summed in the same order, bit for bit, whatever other prefixes the
/// pass evaluates. The price is the Gram work of the partial block at every boundary but the
/// last (at most `BLOCK_ROWS` − 1 rows each) and one copy of the equations.
pub const BLOCK_ROWS: usize = 1024;

/// The first `rows` rows of a block as the nested passes write it: `phi` holds `features`
/// columns of [`BLOCK_ROWS`] values each (column-major, feature j of row i at
/// j · BLOCK_ROWS + i) and `y` holds `outputs` values per row (row-major).
pub fn block_rows<'a>(
    phi: &'a [f64],
    y: &'a [f64],
    rows: usize,
    features: usize,
    outputs: usize,
) -> (MatRef<'a, f64>, MatRef<'a, f64>) {
    (
        MatRef::from_column_major_slice_with_stride(phi, rows, features, BLOCK_ROWS),
        MatRef::from_row_major_slice(&y[..rows * outputs], rows, outputs),
    )
}
