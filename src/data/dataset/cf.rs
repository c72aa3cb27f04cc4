//! CF packing and gaps: `scale_factor`/`add_offset` unpacking and the refusal of fill values,
//! missing values, values outside the valid range, and NaN.
//!
//! References: CF Metadata Conventions 1.11, sections 2.5.1 (missing data) and 8.1 (packed
//! data); NetCDF User Guide, "Attribute Conventions" (`_Unsigned`, default fill values).

use super::{AttrValue, DataType, DatasetError, Packing, Variable};
use std::path::Path;

/// How raw values of one variable become float64 state values.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Cf {
    scale: f64,
    offset: f64,
    packed: bool,
    /// Raw values that mark a gap (`_FillValue`, `missing_value`, or the default fill).
    fills: Vec<f64>,
    valid_min: Option<f64>,
    valid_max: Option<f64>,
    /// Add 2^bits to negative raw values (`_Unsigned = "true"` on a signed integer type).
    unsigned_bits: Option<u32>,
}

impl Cf {
    pub(crate) fn from_variable(path: &Path, var: &Variable) -> Result<Cf, DatasetError> {
        let bad = |attribute: &str, reason: String| DatasetError::Attribute {
            path: path.to_path_buf(),
            name: var.name.clone(),
            attribute: attribute.to_string(),
            reason,
        };
        let numbers = |name: &str| -> Result<Option<Vec<f64>>, DatasetError> {
            match var.attributes.get(name) {
                None => Ok(None),
                Some(AttrValue::Numbers(v)) if !v.is_empty() => Ok(Some(v.clone())),
                Some(AttrValue::Numbers(_)) => Err(bad(name, "it has no value".into())),
                Some(AttrValue::Text(t)) => Err(bad(
                    name,
                    format!("it is text ('{t}') but must be a number"),
                )),
            }
        };
        let single = |name: &str| -> Result<Option<f64>, DatasetError> {
            match numbers(name)? {
                None => Ok(None),
                Some(v) if v.len() == 1 && v[0].is_finite() => Ok(Some(v[0])),
                Some(v) => Err(bad(name, format!("expected one finite number, got {v:?}"))),
            }
        };
        let scale = single("scale_factor")?;
        let offset = single("add_offset")?;
        let unsigned_bits = match var.attributes.get("_Unsigned").and_then(AttrValue::as_text) {
            Some(t) if t.eq_ignore_ascii_case("true") => match var.dtype {
                DataType::I8 | DataType::I16 | DataType::I32 | DataType::I64 => {
                    Some(var.dtype.bits())
                }
                _ => None,
            },
            _ => None,
        };
        let to_unsigned = |v: f64| match unsigned_bits {
            Some(b) if v < 0.0 => v + 2f64.powi(b as i32),
            _ => v,
        };
        let mut fills = Vec::new();
        match numbers("_FillValue")? {
            Some(v) => fills.extend(v.into_iter().take(1)),
            None => fills.extend(var.dtype.default_fill()),
        }
        if let Some(v) = numbers("missing_value")? {
            fills.extend(v);
        }
        let fills: Vec<f64> = fills.into_iter().map(to_unsigned).collect();
        let (mut valid_min, mut valid_max) = (single("valid_min")?, single("valid_max")?);
        if let Some(r) = numbers("valid_range")? {
            if r.len() != 2
                || r[0].partial_cmp(&r[1]) == Some(std::cmp::Ordering::Greater)
                || r[0].is_nan()
                || r[1].is_nan()
            {
                return Err(bad(
                    "valid_range",
                    format!("expected two numbers, minimum then maximum, got {r:?}"),
                ));
            }
            valid_min = Some(r[0]);
            valid_max = Some(r[1]);
        }
        Ok(Cf {
            scale: scale.unwrap_or(1.0),
            offset: offset.unwrap_or(0.0),
            packed: scale.is_some() || offset.is_some(),
            fills,
            valid_min: valid_min.map(to_unsigned),
            valid_max: valid_max.map(to_unsigned),
            unsigned_bits,
        })
    }

    /// The packing, when the variable declares one.
    pub(crate) fn packing(&self) -> Option<Packing> {
        self.packed.then_some(Packing {
            scale_factor: self.scale,
            add_offset: self.offset,
        })
    }

    /// Unpacks `raw` into `out` (same length). On a gap returns its position, raw value and kind.
    pub(crate) fn apply(
        &self,
        raw: &[f64],
        out: &mut [f64],
    ) -> Result<(), (usize, f64, &'static str)> {
        debug_assert_eq!(raw.len(), out.len());
        let simple = !self.packed
            && self.unsigned_bits.is_none()
            && self.valid_min.is_none()
            && self.valid_max.is_none();
        if simple {
            // The common case, floats with at most a fill value or two: one branch-free scan
            // for any gap, and the position only when there is one.
            let mut gap = false;
            for &r in raw {
                gap |= !r.is_finite();
            }
            for &f in &self.fills {
                for &r in raw {
                    gap |= r == f;
                }
            }
            if gap {
                for (i, &r) in raw.iter().enumerate() {
                    if self.fills.contains(&r) {
                        return Err((i, r, "the fill value"));
                    }
                    if !r.is_finite() {
                        return Err((i, r, "not a finite number"));
                    }
                }
            }
            out.copy_from_slice(raw);
            return Ok(());
        }
        for (i, (&r0, o)) in raw.iter().zip(out.iter_mut()).enumerate() {
            let r = match self.unsigned_bits {
                Some(b) if r0 < 0.0 => r0 + 2f64.powi(b as i32),
                _ => r0,
            };
            if self.fills.contains(&r) {
                return Err((i, r, "the fill value"));
            }
            if self.valid_min.is_some_and(|m| r < m) || self.valid_max.is_some_and(|m| r > m) {
                return Err((i, r, "outside valid_min/valid_max/valid_range"));
            }
            let v = r * self.scale + self.offset;
            if !v.is_finite() {
                return Err((i, r, "not a finite number"));
            }
            *o = v;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeMap;

    fn var(dtype: DataType, attrs: &[(&str, AttrValue)]) -> Variable {
        Variable {
            name: "w".into(),
            dims: vec!["time".into()],
            shape: vec![3],
            dtype,
            attributes: attrs
                .iter()
                .map(|(k, v)| (k.to_string(), v.clone()))
                .collect::<BTreeMap<_, _>>(),
        }
    }

    #[test]
    fn packed_shorts_unpack_and_fills_are_refused() {
        let n = |v: f64| AttrValue::Numbers(vec![v]);
        let v = var(
            DataType::I16,
            &[
                ("scale_factor", n(0.5)),
                ("add_offset", n(10.0)),
                ("_FillValue", n(-1.0)),
            ],
        );
        let cf = Cf::from_variable(Path::new("f.nc"), &v).unwrap();
        let mut out = [0.0; 3];
        cf.apply(&[0.0, 2.0, -32767.0], &mut out).unwrap();
        // The default fill of int16 does not apply once _FillValue is given.
        assert_eq!(out, [10.0, 11.0, 10.0 - 32767.0 * 0.5]);
        let e = cf.apply(&[0.0, -1.0, 1.0], &mut out).unwrap_err();
        assert_eq!((e.0, e.1), (1, -1.0));
        assert_eq!(
            cf.packing(),
            Some(Packing {
                scale_factor: 0.5,
                add_offset: 10.0
            })
        );
    }

    #[test]
    fn default_fill_nan_valid_range_and_unsigned() {
        let cf = Cf::from_variable(Path::new("f.nc"), &var(DataType::F32, &[])).unwrap();
        let mut out = [0.0; 2];
        let fill = 9.969_21e36_f32 as f64;
        assert_eq!(cf.apply(&[1.0, fill], &mut out).unwrap_err().0, 1);
        assert_eq!(cf.apply(&[f64::NAN, 1.0], &mut out).unwrap_err().0, 0);
        let n = |v: Vec<f64>| AttrValue::Numbers(v);
        let cf = Cf::from_variable(
            Path::new("f.nc"),
            &var(
                DataType::I8,
                &[
                    ("valid_range", n(vec![0.0, 200.0])),
                    ("_Unsigned", AttrValue::Text("true".into())),
                ],
            ),
        )
        .unwrap();
        // -56 as an unsigned byte is 200, inside the valid range; -55 is 201, outside.
        cf.apply(&[-56.0, 3.0], &mut out).unwrap();
        assert_eq!(out, [200.0, 3.0]);
        assert_eq!(cf.apply(&[3.0, -55.0], &mut out).unwrap_err().0, 1);
        let e = Cf::from_variable(
            Path::new("f.nc"),
            &var(
                DataType::F64,
                &[("scale_factor", AttrValue::Text("2".into()))],
            ),
        )
        .unwrap_err()
        .to_string();
        assert!(
            e.contains("'w'") && e.contains("scale_factor") && e.contains("text"),
            "{e}"
        );
    }
}
