//! Element types of stored arrays and their conversion to float64 from either byte order.

use serde::{Deserialize, Serialize};

/// The type of a stored variable.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DataType {
    I8,
    U8,
    I16,
    U16,
    I32,
    U32,
    I64,
    U64,
    F32,
    F64,
    /// Characters (NetCDF `char`), not numeric.
    Char,
    /// Any other type (strings, compound, boolean…), by its name in the file; not numeric.
    Other(String),
}

impl DataType {
    /// Bytes per element (1 for `Char`, 0 for `Other`).
    pub fn size(&self) -> usize {
        match self {
            DataType::I8 | DataType::U8 | DataType::Char => 1,
            DataType::I16 | DataType::U16 => 2,
            DataType::I32 | DataType::U32 | DataType::F32 => 4,
            DataType::I64 | DataType::U64 | DataType::F64 => 8,
            DataType::Other(_) => 0,
        }
    }

    /// Integers and floats.
    pub fn is_numeric(&self) -> bool {
        !matches!(self, DataType::Char | DataType::Other(_))
    }

    /// Integer types.
    pub fn is_integer(&self) -> bool {
        self.is_numeric() && !matches!(self, DataType::F32 | DataType::F64)
    }

    /// The netCDF default fill value of the type (netcdf.h `NC_FILL_*`, the values
    /// netCDF4-python lists in `netCDF4.default_fillvals`; 9.969209968386869e36 for both float
    /// types), or `None` for bytes, whose default fill the NetCDF User Guide ("Fill Values")
    /// advises not to apply.
    pub fn default_fill(&self) -> Option<f64> {
        match self {
            DataType::I16 => Some(-32767.0),
            DataType::U16 => Some(65535.0),
            DataType::I32 => Some(-2147483647.0),
            DataType::U32 => Some(4294967295.0),
            DataType::I64 => Some(-9223372036854775806.0),
            DataType::U64 => Some(18446744073709551614.0),
            DataType::F32 => Some(f32::from_bits(0x7cf0_0000) as f64),
            DataType::F64 => Some(f64::from_bits(0x479e_0000_0000_0000)),
            _ => None,
        }
    }

    /// Bits per element.
    pub(crate) fn bits(&self) -> u32 {
        8 * self.size() as u32
    }
}

impl std::fmt::Display for DataType {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let s = match self {
            DataType::I8 => "int8",
            DataType::U8 => "uint8",
            DataType::I16 => "int16",
            DataType::U16 => "uint16",
            DataType::I32 => "int32",
            DataType::U32 => "uint32",
            DataType::I64 => "int64",
            DataType::U64 => "uint64",
            DataType::F32 => "float32",
            DataType::F64 => "float64",
            DataType::Char => "char",
            DataType::Other(s) => s,
        };
        f.write_str(s)
    }
}

/// Appends the values of `bytes` (elements of `dtype`, big-endian when `big`) to `out` as
/// float64. `bytes.len()` must be a multiple of the element size.
pub(crate) fn decode(dtype: &DataType, big: bool, bytes: &[u8], out: &mut Vec<f64>) {
    macro_rules! conv {
        ($t:ty, $n:expr) => {{
            let it = bytes.chunks_exact($n).map(|c| {
                let a: [u8; $n] = c.try_into().expect("chunk of element size");
                (if big {
                    <$t>::from_be_bytes(a)
                } else {
                    <$t>::from_le_bytes(a)
                }) as f64
            });
            out.extend(it);
        }};
    }
    match dtype {
        DataType::I8 => out.extend(bytes.iter().map(|&b| b as i8 as f64)),
        DataType::U8 | DataType::Char => out.extend(bytes.iter().map(|&b| b as f64)),
        DataType::I16 => conv!(i16, 2),
        DataType::U16 => conv!(u16, 2),
        DataType::I32 => conv!(i32, 4),
        DataType::U32 => conv!(u32, 4),
        DataType::I64 => conv!(i64, 8),
        DataType::U64 => conv!(u64, 8),
        DataType::F32 => conv!(f32, 4),
        DataType::F64 => conv!(f64, 8),
        DataType::Other(_) => {}
    }
}

/// The offsets, in elements, of a hyperslab of an array stored contiguously in C order with
/// `shape`, grouped into runs: calls `run(first_element, elements, stride_within_run)` for every
/// run in C order of the selection. A run is either contiguous (stride 1, possibly spanning
/// several trailing dimensions read whole) or the strided innermost dimension.
pub(crate) fn for_each_run(
    shape: &[usize],
    spans: &[super::Span],
    mut run: impl FnMut(u64, usize, usize) -> Result<(), super::DatasetError>,
) -> Result<(), super::DatasetError> {
    let n = shape.len();
    if n == 0 {
        return run(0, 1, 1);
    }
    if spans.iter().any(|s| s.count == 0) {
        return Ok(());
    }
    // Element strides of the C-order layout.
    let mut strides = vec![1u64; n];
    for i in (0..n.saturating_sub(1)).rev() {
        strides[i] = strides[i + 1] * shape[i + 1] as u64;
    }
    // Trailing dimensions read whole merge into one contiguous run.
    let mut inner = n;
    let mut run_len = 1usize;
    while inner > 0 {
        let s = spans[inner - 1];
        if s.start == 0 && s.stride == 1 && s.count == shape[inner - 1] {
            run_len *= s.count;
            inner -= 1;
        } else {
            break;
        }
    }
    let (outer, run_len, run_stride) = if inner == 0 {
        (0, run_len, 1)
    } else {
        // The innermost partially read dimension forms the run (contiguous or strided).
        let s = spans[inner - 1];
        if run_len == 1 {
            (inner - 1, s.count, s.stride)
        } else if s.stride == 1 {
            (inner - 1, s.count * run_len, 1)
        } else {
            (inner, run_len, 1)
        }
    };
    let base_dim = if inner == 0 { 0 } else { inner - 1 };
    let run_start_offset = |idx: &[usize]| -> u64 {
        let mut off = 0u64;
        for d in 0..outer {
            off += spans[d].at(idx[d]) as u64 * strides[d];
        }
        if outer < n && inner > 0 && outer == base_dim {
            off += spans[base_dim].start as u64 * strides[base_dim];
        }
        off
    };
    let mut idx = vec![0usize; outer];
    loop {
        run(run_start_offset(&idx), run_len, run_stride)?;
        // Odometer over the outer dimensions.
        let mut d = outer;
        loop {
            if d == 0 {
                return Ok(());
            }
            d -= 1;
            idx[d] += 1;
            if idx[d] < spans[d].count {
                break;
            }
            idx[d] = 0;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::super::Span;
    use super::*;

    /// Every element offset a hyperslab visits, computed element by element.
    fn naive(shape: &[usize], spans: &[Span]) -> Vec<u64> {
        let n = shape.len();
        let total: usize = spans.iter().map(|s| s.count).product();
        let mut out = Vec::new();
        for flat in 0..total {
            let mut rem = flat;
            let mut idx = vec![0; n];
            for d in (0..n).rev() {
                idx[d] = rem % spans[d].count;
                rem /= spans[d].count;
            }
            let mut off = 0u64;
            let mut stride = 1u64;
            for d in (0..n).rev() {
                off += spans[d].at(idx[d]) as u64 * stride;
                stride *= shape[d] as u64;
            }
            out.push(off);
        }
        out
    }

    fn by_runs(shape: &[usize], spans: &[Span]) -> Vec<u64> {
        let mut out = Vec::new();
        for_each_run(shape, spans, |first, len, stride| {
            out.extend((0..len).map(|k| first + (k * stride) as u64));
            Ok(())
        })
        .unwrap();
        out
    }

    #[test]
    fn runs_visit_the_same_elements_as_a_naive_walk() {
        let sp = |start, count, stride| Span {
            start,
            count,
            stride,
        };
        let shape = [5, 4, 6];
        let cases = [
            vec![sp(0, 5, 1), sp(0, 4, 1), sp(0, 6, 1)],
            vec![sp(1, 2, 2), sp(0, 4, 1), sp(0, 6, 1)],
            vec![sp(1, 2, 2), sp(1, 3, 1), sp(0, 6, 1)],
            vec![sp(0, 5, 1), sp(0, 4, 1), sp(1, 2, 3)],
            vec![sp(2, 1, 1), sp(0, 2, 3), sp(0, 6, 1)],
            vec![sp(4, 1, 1), sp(3, 1, 1), sp(5, 1, 1)],
            vec![sp(0, 3, 2), sp(1, 2, 2), sp(2, 2, 2)],
        ];
        for spans in cases {
            assert_eq!(by_runs(&shape, &spans), naive(&shape, &spans), "{spans:?}");
        }
    }

    #[test]
    fn big_and_little_endian_decode() {
        let mut out = Vec::new();
        decode(&DataType::I16, true, &[0xff, 0xfe, 0x00, 0x02], &mut out);
        decode(&DataType::F32, false, &1.5f32.to_le_bytes(), &mut out);
        decode(&DataType::U8, true, &[200], &mut out);
        decode(&DataType::I8, true, &[200], &mut out);
        assert_eq!(out, vec![-2.0, 2.0, 1.5, 200.0, -56.0]);
    }
}
