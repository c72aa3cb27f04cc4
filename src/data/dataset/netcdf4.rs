//! NetCDF-4/HDF5 files through the system's libnetcdf (the `netcdf` crate), behind the cargo
//! feature `netcdf4`. Variables of the root group are listed; libnetcdf converts every numeric
//! type to float64 (`nc_get_vars_double`) and reads only the requested hyperslab.
//!
//! Reference: NetCDF C library, `nc_get_vars` (Unidata NetCDF-C documentation).

use super::{AttrValue, DataType, DatasetError, Dimension, Format, Opened, Source, Span, Variable};
use netcdf::types::NcVariableType;
use netcdf::{AttributeValue, Extent, Extents};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

struct Netcdf4Source {
    path: PathBuf,
    file: netcdf::File,
    names: Vec<String>,
}

fn lib_err(path: &Path, e: netcdf::Error) -> DatasetError {
    DatasetError::Library {
        path: path.to_path_buf(),
        reason: format!("libnetcdf: {e}"),
    }
}

fn data_type(t: &NcVariableType) -> DataType {
    use netcdf::types::{FloatType, IntType};
    match t {
        NcVariableType::Int(IntType::I8) => DataType::I8,
        NcVariableType::Int(IntType::U8) => DataType::U8,
        NcVariableType::Int(IntType::I16) => DataType::I16,
        NcVariableType::Int(IntType::U16) => DataType::U16,
        NcVariableType::Int(IntType::I32) => DataType::I32,
        NcVariableType::Int(IntType::U32) => DataType::U32,
        NcVariableType::Int(IntType::I64) => DataType::I64,
        NcVariableType::Int(IntType::U64) => DataType::U64,
        NcVariableType::Float(FloatType::F32) => DataType::F32,
        NcVariableType::Float(FloatType::F64) => DataType::F64,
        NcVariableType::Char => DataType::Char,
        NcVariableType::String => DataType::Other("string".into()),
        NcVariableType::Compound(_) => DataType::Other("compound".into()),
        NcVariableType::Opaque(_) => DataType::Other("opaque".into()),
        NcVariableType::Enum(_) => DataType::Other("enum".into()),
        NcVariableType::Vlen(_) => DataType::Other("vlen".into()),
    }
}

fn attr_value(v: AttributeValue) -> AttrValue {
    use AttributeValue as A;
    let n = |v: Vec<f64>| AttrValue::Numbers(v);
    match v {
        A::Uchar(x) => n(vec![x as f64]),
        A::Uchars(x) => n(x.into_iter().map(f64::from).collect()),
        A::Schar(x) => n(vec![x as f64]),
        A::Schars(x) => n(x.into_iter().map(f64::from).collect()),
        A::Ushort(x) => n(vec![x as f64]),
        A::Ushorts(x) => n(x.into_iter().map(f64::from).collect()),
        A::Short(x) => n(vec![x as f64]),
        A::Shorts(x) => n(x.into_iter().map(f64::from).collect()),
        A::Uint(x) => n(vec![x as f64]),
        A::Uints(x) => n(x.into_iter().map(f64::from).collect()),
        A::Int(x) => n(vec![x as f64]),
        A::Ints(x) => n(x.into_iter().map(f64::from).collect()),
        A::Ulonglong(x) => n(vec![x as f64]),
        A::Ulonglongs(x) => n(x.into_iter().map(|v| v as f64).collect()),
        A::Longlong(x) => n(vec![x as f64]),
        A::Longlongs(x) => n(x.into_iter().map(|v| v as f64).collect()),
        A::Float(x) => n(vec![x as f64]),
        A::Floats(x) => n(x.into_iter().map(f64::from).collect()),
        A::Double(x) => n(vec![x]),
        A::Doubles(x) => n(x),
        A::Str(s) => AttrValue::Text(s),
        A::Strs(s) => AttrValue::Text(s.join("\n")),
    }
}

fn attributes<'a>(
    path: &Path,
    it: impl Iterator<Item = netcdf::Attribute<'a>>,
) -> Result<BTreeMap<String, AttrValue>, DatasetError> {
    let mut out = BTreeMap::new();
    for a in it {
        let name = a.name().to_string();
        let v = a.value().map_err(|e| lib_err(path, e))?;
        out.insert(name, attr_value(v));
    }
    Ok(out)
}

pub(super) fn open(path: &Path) -> Result<Opened, DatasetError> {
    let file = netcdf::open(path).map_err(|e| lib_err(path, e))?;
    let dimensions = file
        .dimensions()
        .map(|d| Dimension {
            name: d.name(),
            len: d.len(),
            unlimited: d.is_unlimited(),
        })
        .collect();
    let attributes_global = attributes(path, file.attributes())?;
    let mut variables = Vec::new();
    let mut names = Vec::new();
    for v in file.variables() {
        let dims = v.dimensions();
        variables.push(Variable {
            name: v.name(),
            dims: dims.iter().map(|d| d.name()).collect(),
            shape: dims.iter().map(|d| d.len()).collect(),
            dtype: data_type(&v.vartype()),
            attributes: attributes(path, v.attributes())?,
        });
        names.push(v.name());
    }
    Ok(Opened {
        format: Format::Netcdf4,
        dimensions,
        variables,
        attributes: attributes_global,
        source: Box::new(Netcdf4Source {
            path: path.to_path_buf(),
            file,
            names,
        }),
    })
}

impl Source for Netcdf4Source {
    fn read_slab(
        &mut self,
        var: usize,
        spans: &[Span],
        out: &mut Vec<f64>,
    ) -> Result<(), DatasetError> {
        let v = self
            .file
            .variable(&self.names[var])
            .expect("variable listed at opening");
        let extents: Vec<Extent> = spans
            .iter()
            .map(|s| Extent::SliceCount {
                start: s.start,
                count: s.count,
                stride: s.stride as isize,
            })
            .collect();
        let values = if spans.is_empty() {
            v.get_values::<f64, _>(Extents::All)
        } else {
            v.get_values::<f64, _>(Extents::Extent(extents))
        }
        .map_err(|e| lib_err(&self.path, e))?;
        out.extend_from_slice(&values);
        Ok(())
    }
}
