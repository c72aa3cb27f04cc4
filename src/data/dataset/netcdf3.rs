//! NetCDF-3 files: a reader of the classic (CDF-1), 64-bit offset (CDF-2) and 64-bit data
//! (CDF-5) formats that reads only the requested hyperslabs, and a small streaming writer of the
//! first two (record by record, so a file larger than memory can be written).
//!
//! Our own implementation of the published format rather than a crate: the specification is two
//! pages of grammar, and reading hyperslabs straight from the file keeps memory at the size of the
//! selection (a whole-variable reader would hold every record of a 10^8-value field).
//!
//! References: "The NetCDF Classic Format Specification" and "64-bit Offset Format" (Unidata,
//! NetCDF User Guide, appendix "File Format Specifications"); "CDF-5 file format specification"
//! (PnetCDF, Argonne National Laboratory).

use super::raw::{decode, for_each_run};
use super::{AttrValue, DataType, DatasetError, Dimension, Format, Opened, Source, Span, Variable};
use std::collections::BTreeMap;
use std::fs::File;
use std::io::{BufWriter, Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

const NC_DIMENSION: u32 = 0x0A;
const NC_VARIABLE: u32 = 0x0B;
const NC_ATTRIBUTE: u32 = 0x0C;
const FORMAT: &str = "NetCDF-3";

fn type_of(code: u32, cdf5: bool) -> Option<DataType> {
    Some(match code {
        1 => DataType::I8,
        2 => DataType::Char,
        3 => DataType::I16,
        4 => DataType::I32,
        5 => DataType::F32,
        6 => DataType::F64,
        7 if cdf5 => DataType::U8,
        8 if cdf5 => DataType::U16,
        9 if cdf5 => DataType::U32,
        10 if cdf5 => DataType::I64,
        11 if cdf5 => DataType::U64,
        _ => return None,
    })
}

fn code_of(t: &DataType) -> Option<u32> {
    Some(match t {
        DataType::I8 => 1,
        DataType::Char => 2,
        DataType::I16 => 3,
        DataType::I32 => 4,
        DataType::F32 => 5,
        DataType::F64 => 6,
        _ => return None,
    })
}

fn pad4(n: u64) -> u64 {
    n.div_ceil(4) * 4
}

/// Reads the header from a file on demand, in chunks.
struct Header<'a> {
    file: &'a mut File,
    path: &'a Path,
    data: Vec<u8>,
    pos: usize,
    file_len: u64,
    /// CDF-5: counts are 8 bytes.
    wide_counts: bool,
}

impl Header<'_> {
    fn bad(&self, reason: impl Into<String>) -> DatasetError {
        DatasetError::Malformed {
            path: self.path.to_path_buf(),
            format: FORMAT,
            reason: reason.into(),
        }
    }

    fn need(&mut self, n: usize) -> Result<(), DatasetError> {
        let want = self.pos + n;
        if want <= self.data.len() {
            return Ok(());
        }
        if want as u64 > self.file_len {
            return Err(self.bad(format!(
                "the header runs past the end of the file ({} bytes)",
                self.file_len
            )));
        }
        let chunk = (want - self.data.len()).max(64 << 10);
        let end = (self.data.len() + chunk).min(self.file_len as usize);
        let start = self.data.len();
        self.data.resize(end, 0);
        self.file
            .read_exact(&mut self.data[start..end])
            .map_err(|source| DatasetError::Io {
                path: self.path.to_path_buf(),
                source,
            })
    }

    fn bytes(&mut self, n: usize) -> Result<&[u8], DatasetError> {
        self.need(n)?;
        let s = &self.data[self.pos..self.pos + n];
        self.pos += n;
        Ok(s)
    }

    fn u32(&mut self) -> Result<u32, DatasetError> {
        let b = self.bytes(4)?;
        Ok(u32::from_be_bytes(b.try_into().expect("4 bytes")))
    }

    fn u64(&mut self) -> Result<u64, DatasetError> {
        let b = self.bytes(8)?;
        Ok(u64::from_be_bytes(b.try_into().expect("8 bytes")))
    }

    /// A NON_NEG count: 4 bytes (CDF-1/2) or 8 bytes (CDF-5).
    fn count(&mut self) -> Result<u64, DatasetError> {
        let v = if self.wide_counts {
            self.u64()?
        } else {
            self.u32()? as u64
        };
        if !self.wide_counts && v > i32::MAX as u64 {
            return Err(self.bad(format!("a count of {v} is negative as a signed integer")));
        }
        Ok(v)
    }

    /// A count of items that each take at least `min_bytes` bytes in the file, checked against
    /// the file size so that a damaged header cannot ask for absurd allocations.
    fn items(&mut self, min_bytes: u64, what: &str) -> Result<usize, DatasetError> {
        let n = self.count()?;
        if n.saturating_mul(min_bytes) > self.file_len {
            return Err(self.bad(format!(
                "it declares {n} {what}, more than the file's {} bytes can hold",
                self.file_len
            )));
        }
        Ok(n as usize)
    }

    fn name(&mut self) -> Result<String, DatasetError> {
        let n = self.items(1, "name bytes")?;
        let b = self.bytes(n)?.to_vec();
        let padding = (pad4(n as u64) - n as u64) as usize;
        self.bytes(padding)?;
        String::from_utf8(b).map_err(|_| self.bad("a name is not valid UTF-8"))
    }

    fn attributes(&mut self, cdf5: bool) -> Result<BTreeMap<String, AttrValue>, DatasetError> {
        let tag = self.u32()?;
        let n = self.items(12, "attributes")?;
        if tag == 0 {
            if n != 0 {
                return Err(self.bad("an absent attribute list has a nonzero count"));
            }
            return Ok(BTreeMap::new());
        }
        if tag != NC_ATTRIBUTE {
            return Err(self.bad(format!("expected an attribute list, found tag {tag:#x}")));
        }
        let mut out = BTreeMap::new();
        for _ in 0..n {
            let name = self.name()?;
            let code = self.u32()?;
            let dtype = type_of(code, cdf5)
                .ok_or_else(|| self.bad(format!("attribute '{name}' has unknown type {code}")))?;
            let count = self.items(dtype.size() as u64, "attribute values")?;
            let len = count * dtype.size();
            let bytes = self.bytes(len)?.to_vec();
            self.bytes((pad4(len as u64) - len as u64) as usize)?;
            let value = if dtype == DataType::Char {
                let text = String::from_utf8_lossy(&bytes);
                AttrValue::Text(text.trim_end_matches('\0').to_string())
            } else {
                let mut v = Vec::with_capacity(count);
                decode(&dtype, true, &bytes, &mut v);
                AttrValue::Numbers(v)
            };
            out.insert(name, value);
        }
        Ok(out)
    }
}

/// Where one variable's data lies.
#[derive(Debug, Clone)]
struct Layout {
    dtype: DataType,
    begin: u64,
    /// Shape with the record dimension's length set to the number of records.
    shape: Vec<usize>,
    record: bool,
    /// Bytes of one record of this variable (non-record dimensions × element size).
    slab_bytes: u64,
}

/// A NetCDF-3 file open for reading hyperslabs.
struct Netcdf3Source {
    file: File,
    path: PathBuf,
    layouts: Vec<Layout>,
    record_size: u64,
    buf: Vec<u8>,
}

/// Parses the header of a NetCDF-3 file.
pub(super) fn open(path: &Path, mut file: File) -> Result<Opened, DatasetError> {
    let io = |source| DatasetError::Io {
        path: path.to_path_buf(),
        source,
    };
    let file_len = file.metadata().map_err(io)?.len();
    file.seek(SeekFrom::Start(0)).map_err(io)?;
    let mut h = Header {
        file: &mut file,
        path,
        data: Vec::new(),
        pos: 0,
        file_len,
        wide_counts: false,
    };
    let magic = h.bytes(4)?.to_vec();
    let (format, cdf5, wide_offsets) = match magic[3] {
        1 => (Format::Netcdf3Classic, false, false),
        2 => (Format::Netcdf3Offset64, false, true),
        5 => (Format::Netcdf3Data64, true, true),
        v => {
            return Err(h.bad(format!(
                "version byte {v} is unknown (1 classic, 2 64-bit offset, 5 64-bit data)"
            )))
        }
    };
    h.wide_counts = cdf5;
    let numrecs_raw = if cdf5 { h.u64()? } else { h.u32()? as u64 };
    let streaming = if cdf5 {
        numrecs_raw == u64::MAX
    } else {
        numrecs_raw == u32::MAX as u64
    };
    // Dimensions.
    let tag = h.u32()?;
    let ndims = h.items(8, "dimensions")?;
    if tag != NC_DIMENSION && !(tag == 0 && ndims == 0) {
        return Err(h.bad(format!("expected a dimension list, found tag {tag:#x}")));
    }
    let mut dims = Vec::with_capacity(ndims);
    let mut record_dim = None;
    for i in 0..ndims {
        let name = h.name()?;
        let len = h.count()? as usize;
        if len == 0 {
            if record_dim.is_some() {
                return Err(h.bad("more than one unlimited dimension"));
            }
            record_dim = Some(i);
        }
        dims.push(Dimension {
            name,
            len,
            unlimited: len == 0,
        });
    }
    let attributes = h.attributes(cdf5)?;
    // Variables.
    let tag = h.u32()?;
    let nvars = h.items(16, "variables")?;
    if tag != NC_VARIABLE && !(tag == 0 && nvars == 0) {
        return Err(h.bad(format!("expected a variable list, found tag {tag:#x}")));
    }
    let mut variables = Vec::with_capacity(nvars);
    let mut layouts = Vec::with_capacity(nvars);
    for _ in 0..nvars {
        let name = h.name()?;
        let rank = h.items(4, "dimension ids")?;
        let mut ids = Vec::with_capacity(rank);
        for _ in 0..rank {
            let id = h.count()? as usize;
            if id >= dims.len() {
                return Err(h.bad(format!(
                    "variable '{name}' names dimension id {id}, but there are {} dimensions",
                    dims.len()
                )));
            }
            ids.push(id);
        }
        let attrs = h.attributes(cdf5)?;
        let code = h.u32()?;
        let dtype = type_of(code, cdf5)
            .ok_or_else(|| h.bad(format!("variable '{name}' has unknown type {code}")))?;
        let _vsize = h.count()?;
        let begin = if wide_offsets {
            h.u64()?
        } else {
            h.u32()? as u64
        };
        let record = rank > 0 && Some(ids[0]) == record_dim;
        if ids.iter().skip(1).any(|&i| Some(i) == record_dim) {
            return Err(h.bad(format!(
                "variable '{name}' uses the unlimited dimension other than first"
            )));
        }
        let shape: Vec<usize> = ids.iter().map(|&i| dims[i].len).collect();
        let slab: u64 = shape
            .iter()
            .skip(usize::from(record))
            .map(|&n| n as u64)
            .product::<u64>()
            * dtype.size() as u64;
        variables.push(Variable {
            name,
            dims: ids.iter().map(|&i| dims[i].name.clone()).collect(),
            shape,
            dtype: dtype.clone(),
            attributes: attrs,
        });
        layouts.push(Layout {
            dtype,
            begin,
            shape: Vec::new(),
            record,
            slab_bytes: slab,
        });
    }
    let header_end = h.pos as u64;
    drop(h);
    let bad = |reason: String| DatasetError::Malformed {
        path: path.to_path_buf(),
        format: FORMAT,
        reason,
    };
    // The record size: every record variable's slab padded to 4 bytes, except that a single
    // record variable is not padded (format specification, "Note on padding").
    let record_vars: Vec<usize> = (0..layouts.len()).filter(|&i| layouts[i].record).collect();
    let record_size = if record_vars.len() == 1 {
        layouts[record_vars[0]].slab_bytes
    } else {
        record_vars
            .iter()
            .map(|&i| pad4(layouts[i].slab_bytes))
            .sum()
    };
    let numrecs = if streaming {
        let first = record_vars.iter().map(|&i| layouts[i].begin).min();
        match first {
            Some(b) if record_size > 0 => file_len.saturating_sub(b) / record_size,
            _ => 0,
        }
    } else {
        numrecs_raw
    };
    if let Some(r) = record_dim {
        dims[r].len = numrecs as usize;
    }
    for (var, lay) in variables.iter_mut().zip(layouts.iter_mut()) {
        if lay.record {
            var.shape[0] = numrecs as usize;
        }
        lay.shape = var.shape.clone();
        let end = if lay.record {
            if numrecs == 0 {
                lay.begin
            } else {
                lay.begin + (numrecs - 1) * record_size + lay.slab_bytes
            }
        } else {
            lay.begin + lay.slab_bytes
        };
        if var.dtype.is_numeric() && (lay.begin < header_end && lay.slab_bytes > 0) {
            return Err(bad(format!(
                "variable '{}' starts at byte {} inside the header ({} bytes)",
                var.name, lay.begin, header_end
            )));
        }
        if end > file_len {
            return Err(bad(format!(
                "the file is truncated: variable '{}' needs {end} bytes, the file has {file_len}",
                var.name
            )));
        }
    }
    Ok(Opened {
        format,
        dimensions: dims,
        variables,
        attributes,
        source: Box::new(Netcdf3Source {
            file,
            path: path.to_path_buf(),
            layouts,
            record_size,
            buf: Vec::new(),
        }),
    })
}

impl Netcdf3Source {
    /// Reads `len` elements every `stride` from element `first` of a contiguous array at byte
    /// `base`, appending them to `out`.
    fn read_run(
        &mut self,
        dtype: &DataType,
        base: u64,
        first: u64,
        len: usize,
        stride: usize,
        out: &mut Vec<f64>,
    ) -> Result<(), DatasetError> {
        let size = dtype.size();
        let span = ((len - 1) * stride + 1) * size;
        self.buf.resize(span, 0);
        let io = |source| DatasetError::Io {
            path: self.path.clone(),
            source,
        };
        self.file
            .seek(SeekFrom::Start(base + first * size as u64))
            .map_err(io)?;
        self.file
            .read_exact(&mut self.buf)
            .map_err(|source| DatasetError::Io {
                path: self.path.clone(),
                source,
            })?;
        if stride == 1 {
            decode(dtype, true, &self.buf, out);
        } else {
            for k in 0..len {
                let at = k * stride * size;
                decode(dtype, true, &self.buf[at..at + size], out);
            }
        }
        Ok(())
    }
}

impl Source for Netcdf3Source {
    fn read_slab(
        &mut self,
        var: usize,
        spans: &[Span],
        out: &mut Vec<f64>,
    ) -> Result<(), DatasetError> {
        let lay = self.layouts[var].clone();
        // Records of a variable are contiguous when it is the only record variable.
        if !lay.record || self.record_size == lay.slab_bytes {
            let mut runs = Vec::new();
            for_each_run(&lay.shape, spans, |first, len, stride| {
                runs.push((first, len, stride));
                Ok(())
            })?;
            for (first, len, stride) in runs {
                self.read_run(&lay.dtype, lay.begin, first, len, stride, out)?;
            }
            return Ok(());
        }
        let inner = &lay.shape[1..];
        let mut runs = Vec::new();
        for_each_run(inner, &spans[1..], |first, len, stride| {
            runs.push((first, len, stride));
            Ok(())
        })?;
        for k in 0..spans[0].count {
            let base = lay.begin + spans[0].at(k) as u64 * self.record_size;
            for &(first, len, stride) in &runs {
                self.read_run(&lay.dtype, base, first, len, stride, out)?;
            }
        }
        Ok(())
    }
}

/// Which NetCDF-3 variant [`Netcdf3Writer`] writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Netcdf3Variant {
    /// CDF-1: offsets up to 2 GiB.
    Classic,
    /// CDF-2: 64-bit offsets.
    Offset64,
}

/// A variable of a NetCDF-3 file to write.
#[derive(Debug, Clone, PartialEq)]
pub struct Netcdf3Variable {
    pub name: String,
    /// Dimension names; the unlimited one, if used, first.
    pub dims: Vec<String>,
    /// One of int8, char, int16, int32, float32, float64.
    pub dtype: DataType,
    /// Numeric attributes named `_FillValue`, `missing_value`, `valid_min`, `valid_max` and
    /// `valid_range` are written in the variable's type, other numbers as float64.
    pub attributes: Vec<(String, AttrValue)>,
}

/// The header of a NetCDF-3 file to write.
#[derive(Debug, Clone, PartialEq)]
pub struct Netcdf3Schema {
    pub variant: Netcdf3Variant,
    /// Names and lengths; `None` marks the unlimited (record) dimension.
    pub dimensions: Vec<(String, Option<usize>)>,
    pub attributes: Vec<(String, AttrValue)>,
    pub variables: Vec<Netcdf3Variable>,
}

/// Writes a NetCDF-3 file: the header at creation, fixed-size variables whole
/// ([`Netcdf3Writer::write_fixed`]) and record variables one record at a time
/// ([`Netcdf3Writer::write_record`]); [`Netcdf3Writer::finish`] stores the number of records.
pub struct Netcdf3Writer {
    out: BufWriter<File>,
    path: PathBuf,
    schema: Netcdf3Schema,
    /// Per variable: data offset, bytes per record (or in total), is a record variable.
    places: Vec<(u64, u64, bool)>,
    record_start: u64,
    record_size: u64,
    records: u64,
    position: u64,
}

fn encode(dtype: &DataType, values: &[f64], out: &mut Vec<u8>) {
    for &v in values {
        match dtype {
            DataType::I8 | DataType::Char => out.push(v.round() as i8 as u8),
            DataType::I16 => out.extend((v.round() as i16).to_be_bytes()),
            DataType::I32 => out.extend((v.round() as i32).to_be_bytes()),
            DataType::F32 => out.extend((v as f32).to_be_bytes()),
            DataType::F64 => out.extend(v.to_be_bytes()),
            _ => unreachable!("checked at creation"),
        }
    }
}

impl Netcdf3Writer {
    /// Creates the file and writes its header.
    pub fn create(path: &Path, schema: Netcdf3Schema) -> Result<Netcdf3Writer, DatasetError> {
        let bad = |reason: String| DatasetError::Malformed {
            path: path.to_path_buf(),
            format: "a NetCDF-3 schema",
            reason,
        };
        let dim_index = |name: &str| schema.dimensions.iter().position(|(n, _)| n == name);
        if schema.dimensions.iter().filter(|d| d.1.is_none()).count() > 1 {
            return Err(bad("more than one unlimited dimension".into()));
        }
        let mut ids = Vec::new();
        let mut sizes = Vec::new();
        for v in &schema.variables {
            if code_of(&v.dtype).is_none() {
                return Err(bad(format!(
                    "variable '{}': type {} cannot be written",
                    v.name, v.dtype
                )));
            }
            let mut vid = Vec::new();
            for (k, d) in v.dims.iter().enumerate() {
                let i = dim_index(d).ok_or_else(|| {
                    bad(format!(
                        "variable '{}' names unknown dimension '{d}'",
                        v.name
                    ))
                })?;
                if schema.dimensions[i].1.is_none() && k != 0 {
                    return Err(bad(format!(
                        "variable '{}': the unlimited dimension must come first",
                        v.name
                    )));
                }
                vid.push(i);
            }
            let record = vid
                .first()
                .is_some_and(|&i| schema.dimensions[i].1.is_none());
            let bytes: u64 = vid
                .iter()
                .filter_map(|&i| schema.dimensions[i].1)
                .map(|n| n as u64)
                .product::<u64>()
                * v.dtype.size() as u64;
            ids.push(vid);
            sizes.push((bytes, record));
        }
        let record_count = sizes.iter().filter(|s| s.1).count();
        let header = |begins: &[u64]| -> Vec<u8> {
            let mut h = Vec::new();
            h.extend_from_slice(b"CDF");
            h.push(match schema.variant {
                Netcdf3Variant::Classic => 1,
                Netcdf3Variant::Offset64 => 2,
            });
            h.extend(0u32.to_be_bytes());
            let name = |h: &mut Vec<u8>, s: &str| {
                h.extend((s.len() as u32).to_be_bytes());
                h.extend(s.as_bytes());
                h.resize(pad4(h.len() as u64) as usize, 0);
            };
            let attrs =
                |h: &mut Vec<u8>, list: &[(String, AttrValue)], vtype: Option<&DataType>| {
                    if list.is_empty() {
                        h.extend([0u8; 8]);
                        return;
                    }
                    h.extend(NC_ATTRIBUTE.to_be_bytes());
                    h.extend((list.len() as u32).to_be_bytes());
                    for (n, v) in list {
                        name(h, n);
                        match v {
                            AttrValue::Text(t) => {
                                h.extend(2u32.to_be_bytes());
                                h.extend((t.len() as u32).to_be_bytes());
                                h.extend(t.as_bytes());
                            }
                            AttrValue::Numbers(x) => {
                                let own = matches!(
                                    n.as_str(),
                                    "_FillValue"
                                        | "missing_value"
                                        | "valid_min"
                                        | "valid_max"
                                        | "valid_range"
                                );
                                let t = match vtype {
                                    Some(t) if own => t.clone(),
                                    _ => DataType::F64,
                                };
                                h.extend(code_of(&t).expect("writable type").to_be_bytes());
                                h.extend((x.len() as u32).to_be_bytes());
                                encode(&t, x, h);
                            }
                        }
                        h.resize(pad4(h.len() as u64) as usize, 0);
                    }
                };
            if schema.dimensions.is_empty() {
                h.extend([0u8; 8]);
            } else {
                h.extend(NC_DIMENSION.to_be_bytes());
                h.extend((schema.dimensions.len() as u32).to_be_bytes());
                for (n, len) in &schema.dimensions {
                    name(&mut h, n);
                    h.extend((len.unwrap_or(0) as u32).to_be_bytes());
                }
            }
            attrs(&mut h, &schema.attributes, None);
            if schema.variables.is_empty() {
                h.extend([0u8; 8]);
            } else {
                h.extend(NC_VARIABLE.to_be_bytes());
                h.extend((schema.variables.len() as u32).to_be_bytes());
                for (k, v) in schema.variables.iter().enumerate() {
                    name(&mut h, &v.name);
                    h.extend((ids[k].len() as u32).to_be_bytes());
                    for &i in &ids[k] {
                        h.extend((i as u32).to_be_bytes());
                    }
                    attrs(&mut h, &v.attributes, Some(&v.dtype));
                    h.extend(code_of(&v.dtype).expect("writable type").to_be_bytes());
                    let vsize = pad4(sizes[k].0).min(u32::MAX as u64) as u32;
                    h.extend(vsize.to_be_bytes());
                    match schema.variant {
                        Netcdf3Variant::Classic => h.extend((begins[k] as u32).to_be_bytes()),
                        Netcdf3Variant::Offset64 => h.extend(begins[k].to_be_bytes()),
                    }
                }
            }
            h
        };
        let header_len = header(&vec![0; schema.variables.len()]).len() as u64;
        let mut begins = vec![0u64; schema.variables.len()];
        let mut at = header_len;
        for (k, &(bytes, record)) in sizes.iter().enumerate() {
            if !record {
                begins[k] = at;
                at += pad4(bytes);
            }
        }
        let record_start = at;
        for (k, &(bytes, record)) in sizes.iter().enumerate() {
            if record {
                begins[k] = at;
                at += if record_count == 1 {
                    bytes
                } else {
                    pad4(bytes)
                };
            }
        }
        let record_size = at - record_start;
        if schema.variant == Netcdf3Variant::Classic && begins.iter().any(|&b| b > i32::MAX as u64)
        {
            return Err(bad(
                "a variable starts beyond 2 GiB, past what the classic format can address; use the 64-bit offset variant".into(),
            ));
        }
        let bytes = header(&begins);
        let file = File::create(path).map_err(|source| DatasetError::Io {
            path: path.to_path_buf(),
            source,
        })?;
        let mut out = BufWriter::with_capacity(1 << 20, file);
        out.write_all(&bytes).map_err(|source| DatasetError::Io {
            path: path.to_path_buf(),
            source,
        })?;
        let places = sizes
            .iter()
            .zip(&begins)
            .map(|(&(bytes, record), &b)| (b, bytes, record))
            .collect();
        Ok(Netcdf3Writer {
            out,
            path: path.to_path_buf(),
            schema,
            places,
            record_start,
            record_size,
            records: 0,
            position: bytes.len() as u64,
        })
    }

    fn io(&self, source: std::io::Error) -> DatasetError {
        DatasetError::Io {
            path: self.path.clone(),
            source,
        }
    }

    fn write_at(&mut self, at: u64, bytes: &[u8]) -> Result<(), DatasetError> {
        if at != self.position {
            self.out.seek(SeekFrom::Start(at)).map_err(|e| self.io(e))?;
        }
        self.out.write_all(bytes).map_err(|e| self.io(e))?;
        self.position = at + bytes.len() as u64;
        Ok(())
    }

    fn bad(&self, reason: String) -> DatasetError {
        DatasetError::Malformed {
            path: self.path.clone(),
            format: "NetCDF-3 writer input",
            reason,
        }
    }

    /// Writes every value of a fixed-size variable (C order).
    pub fn write_fixed(&mut self, name: &str, values: &[f64]) -> Result<(), DatasetError> {
        let k = self
            .schema
            .variables
            .iter()
            .position(|v| v.name == name)
            .ok_or_else(|| self.bad(format!("no variable '{name}'")))?;
        let (begin, bytes, record) = self.places[k];
        let dtype = self.schema.variables[k].dtype.clone();
        if record || values.len() as u64 * dtype.size() as u64 != bytes {
            return Err(self.bad(format!(
                "'{name}' is a record variable or takes {} values, not {}",
                bytes / dtype.size() as u64,
                values.len()
            )));
        }
        let mut buf = Vec::with_capacity(bytes as usize);
        encode(&dtype, values, &mut buf);
        self.write_at(begin, &buf)
    }

    /// Appends one record: one slice per record variable, in the order of the schema.
    pub fn write_record(&mut self, values: &[&[f64]]) -> Result<(), DatasetError> {
        let record_vars: Vec<usize> = (0..self.places.len())
            .filter(|&k| self.places[k].2)
            .collect();
        if values.len() != record_vars.len() {
            return Err(self.bad(format!(
                "a record needs {} slices (one per record variable), got {}",
                record_vars.len(),
                values.len()
            )));
        }
        let mut buf = Vec::with_capacity(self.record_size as usize);
        for (&k, v) in record_vars.iter().zip(values) {
            let (_, bytes, _) = self.places[k];
            let dtype = &self.schema.variables[k].dtype;
            if v.len() as u64 * dtype.size() as u64 != bytes {
                return Err(self.bad(format!(
                    "record variable '{}' takes {} values per record, got {}",
                    self.schema.variables[k].name,
                    bytes / dtype.size() as u64,
                    v.len()
                )));
            }
            encode(dtype, v, &mut buf);
            if record_vars.len() > 1 {
                buf.resize(pad4(buf.len() as u64) as usize, 0);
            }
        }
        let at = self.record_start + self.records * self.record_size;
        self.write_at(at, &buf)?;
        self.records += 1;
        Ok(())
    }

    /// Stores the number of records and flushes the file.
    pub fn finish(mut self) -> Result<(), DatasetError> {
        let n = u32::try_from(self.records).map_err(|_| self.bad("too many records".into()))?;
        let end = self.record_start + self.records * self.record_size;
        self.write_at(4, &n.to_be_bytes())?;
        self.out.flush().map_err(|e| self.io(e))?;
        let file = self.out.get_ref();
        if file.metadata().map_err(|e| self.io(e))?.len() < end {
            file.set_len(end).map_err(|e| self.io(e))?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::super::{Dataset, Selection, Slice};
    use super::*;

    fn var(name: &str, dims: &[&str], dtype: DataType) -> Netcdf3Variable {
        Netcdf3Variable {
            name: name.into(),
            dims: dims.iter().map(|s| s.to_string()).collect(),
            dtype,
            attributes: vec![],
        }
    }

    #[test]
    fn time_need_not_be_the_first_dimension_and_shorts_are_padded() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("a.nc");
        let schema = Netcdf3Schema {
            variant: Netcdf3Variant::Classic,
            dimensions: vec![
                ("rec".into(), None),
                ("x".into(), Some(3)),
                ("time".into(), Some(4)),
            ],
            attributes: vec![],
            variables: vec![
                // A fixed-size variable with time last: a(x, time) = 10 x + time.
                var("a", &["x", "time"], DataType::F64),
                // Two record variables of 3 shorts (6 bytes, padded to 8 in each record).
                var("s", &["rec", "x"], DataType::I16),
                var("f", &["rec"], DataType::F32),
            ],
        };
        let mut w = Netcdf3Writer::create(&path, schema).unwrap();
        let a: Vec<f64> = (0..3)
            .flat_map(|x| (0..4).map(move |t| (10 * x + t) as f64))
            .collect();
        w.write_fixed("a", &a).unwrap();
        for r in 0..5 {
            let s: Vec<f64> = (0..3).map(|x| (100 * r + x) as f64).collect();
            w.write_record(&[&s, &[r as f64 + 0.5]]).unwrap();
        }
        w.finish().unwrap();
        let mut ds = Dataset::open(&path).unwrap();
        let snap = ds
            .read(&Selection {
                variables: vec!["a".into()],
                time: Some("time".into()),
                time_slice: Slice::new(1, None, 2),
                ..Selection::default()
            })
            .unwrap();
        // Rows are times 1 and 3; columns x = 0, 1, 2.
        assert_eq!(snap.values.row(0).to_vec(), vec![1.0, 11.0, 21.0]);
        assert_eq!(snap.values.row(1).to_vec(), vec![3.0, 13.0, 23.0]);
        let snap = ds.read(&Selection::variables(&["f", "s"])).unwrap();
        assert_eq!(snap.values.nrows(), 5);
        assert_eq!(snap.values.row(4).to_vec(), vec![4.5, 400.0, 401.0, 402.0]);
    }

    #[test]
    fn damaged_headers_and_truncated_files_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("b.nc");
        let schema = Netcdf3Schema {
            variant: Netcdf3Variant::Offset64,
            dimensions: vec![("time".into(), None), ("x".into(), Some(4))],
            attributes: vec![],
            variables: vec![var("u", &["time", "x"], DataType::F64)],
        };
        let mut w = Netcdf3Writer::create(&path, schema).unwrap();
        for r in 0..3 {
            w.write_record(&[&[r as f64; 4]]).unwrap();
        }
        w.finish().unwrap();
        let bytes = std::fs::read(&path).unwrap();
        std::fs::write(&path, &bytes[..bytes.len() - 8]).unwrap();
        let e = Dataset::open(&path).unwrap_err().to_string();
        assert!(e.contains("truncated") && e.contains("'u'"), "{e}");
        let mut bad = bytes.clone();
        bad[3] = 3;
        std::fs::write(&path, &bad).unwrap();
        let e = Dataset::open(&path).unwrap_err().to_string();
        assert!(e.contains("version byte 3"), "{e}");
        // A dimension count of 2^30 cannot fit in a file of a few hundred bytes.
        let mut bad = bytes.clone();
        bad[12..16].copy_from_slice(&(1u32 << 30).to_be_bytes());
        std::fs::write(&path, &bad).unwrap();
        let e = Dataset::open(&path).unwrap_err().to_string();
        assert!(e.contains("declares 1073741824 dimensions"), "{e}");
        // Streaming files (numrecs = -1) take the record count from the file size.
        let mut streaming = bytes.clone();
        streaming[4..8].copy_from_slice(&[0xff; 4]);
        std::fs::write(&path, &streaming).unwrap();
        let snap = Dataset::open(&path)
            .unwrap()
            .read(&Selection::variables(&["u"]))
            .unwrap();
        assert_eq!(snap.values.nrows(), 3);
    }
}
