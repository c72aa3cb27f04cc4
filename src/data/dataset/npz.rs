//! NumPy `.npz` archives (`numpy.savez`, `numpy.savez_compressed`): each member `NAME.npy` is a
//! variable whose axes are named `axis0`, `axis1`, …; members are read in place (stored members
//! by seeking, deflated ones by streaming), so only the selected values are kept.
//!
//! References: NumPy `.npy` format 1.0–3.0 (numpy.lib.format); PKWARE APPNOTE.TXT (ZIP), whose
//! directory the `zip` crate reads; RFC 1951 (deflate), decoded by `flate2`.

use super::raw::{decode, for_each_run};
use super::{DataType, DatasetError, Format, Opened, Source, Span, Variable};
use std::collections::BTreeMap;
use std::fs::File;
use std::io::{BufReader, Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};

const FORMAT: &str = ".npz (zip of .npy arrays)";

/// How a member's bytes are stored.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Storage {
    Stored,
    Deflated,
}

#[derive(Debug, Clone)]
struct Member {
    /// Offset of the member's (possibly compressed) bytes in the archive.
    data_start: u64,
    compressed_size: u64,
    storage: Storage,
    /// Bytes of the `.npy` header before the values (uncompressed stream).
    header_len: u64,
    dtype: DataType,
    big_endian: bool,
    shape: Vec<usize>,
}

/// An open decompressing stream of one member, positioned at byte `pos` of its `.npy` data.
struct Inflating {
    member: usize,
    pos: u64,
    reader: flate2::read::DeflateDecoder<BufReader<std::io::Take<File>>>,
}

struct NpzSource {
    path: PathBuf,
    file: File,
    members: Vec<Member>,
    stream: Option<Inflating>,
    buf: Vec<u8>,
}

/// The parts of a `.npy` header this reader needs.
struct NpyHeader {
    len: u64,
    descr: String,
    fortran: bool,
    shape: Vec<usize>,
}

/// Parses a `.npy` header from the first bytes of a member (at most `max` of them are needed).
fn parse_npy_header(r: &mut impl Read) -> Result<NpyHeader, String> {
    let mut pre = [0u8; 10];
    r.read_exact(&mut pre).map_err(|e| e.to_string())?;
    if &pre[..6] != b"\x93NUMPY" {
        return Err("the member is not a .npy array".into());
    }
    let (len, prefix) = match pre[6] {
        1 => (u16::from_le_bytes([pre[8], pre[9]]) as u64, 10u64),
        2 | 3 => {
            let mut b = [0u8; 2];
            r.read_exact(&mut b).map_err(|e| e.to_string())?;
            (
                u32::from_le_bytes([pre[8], pre[9], b[0], b[1]]) as u64,
                12u64,
            )
        }
        v => return Err(format!(".npy version {v} is unknown")),
    };
    if len > 1 << 20 {
        return Err(format!("a .npy header of {len} bytes is implausible"));
    }
    let mut h = vec![0u8; len as usize];
    r.read_exact(&mut h).map_err(|e| e.to_string())?;
    let h = String::from_utf8_lossy(&h).to_string();
    let value_after = |key: &str| -> Result<String, String> {
        let at = h
            .find(&format!("'{key}'"))
            .ok_or_else(|| format!("the .npy header has no '{key}'"))?;
        let rest = &h[at + key.len() + 2..];
        let colon = rest.find(':').ok_or("malformed .npy header")?;
        Ok(rest[colon + 1..].trim_start().to_string())
    };
    let d = value_after("descr")?;
    let quote = d.chars().next().ok_or("empty descr")?;
    if quote != '\'' && quote != '"' {
        return Err(format!(
            "structured dtype {} is not supported; save plain numeric arrays",
            d.split('}').next().unwrap_or(&d)
        ));
    }
    let descr = d[1..]
        .split(quote)
        .next()
        .ok_or("malformed descr")?
        .to_string();
    let fortran = value_after("fortran_order")?.starts_with("True");
    let s = value_after("shape")?;
    let inner = s
        .strip_prefix('(')
        .and_then(|s| s.split(')').next())
        .ok_or("malformed shape")?;
    let shape = inner
        .split(',')
        .map(str::trim)
        .filter(|t| !t.is_empty())
        .map(|t| t.trim_end_matches('L').parse::<usize>())
        .collect::<Result<Vec<_>, _>>()
        .map_err(|_| format!("malformed shape ({inner})"))?;
    Ok(NpyHeader {
        len: prefix + len,
        descr,
        fortran,
        shape,
    })
}

/// The element type and byte order of a `.npy` type string such as `<f8`.
fn npy_type(descr: &str) -> (DataType, bool) {
    let (order, code) = descr.split_at(descr.len().min(1));
    let big = order == ">";
    let t = match code {
        "f8" => DataType::F64,
        "f4" => DataType::F32,
        "i1" => DataType::I8,
        "u1" => DataType::U8,
        "i2" => DataType::I16,
        "u2" => DataType::U16,
        "i4" => DataType::I32,
        "u4" => DataType::U32,
        "i8" => DataType::I64,
        "u8" => DataType::U64,
        _ => DataType::Other(format!("numpy '{descr}'")),
    };
    (t, big)
}

pub(super) fn open(path: &Path, file: File) -> Result<Opened, DatasetError> {
    let bad = |reason: String| DatasetError::Malformed {
        path: path.to_path_buf(),
        format: FORMAT,
        reason,
    };
    let io = |source| DatasetError::Io {
        path: path.to_path_buf(),
        source,
    };
    let mut zip = zip::ZipArchive::new(BufReader::new(file)).map_err(|e| bad(e.to_string()))?;
    let mut members = Vec::new();
    let mut variables = Vec::new();
    for i in 0..zip.len() {
        let (name, data_start, compressed_size, method) = {
            let f = zip.by_index_raw(i).map_err(|e| bad(e.to_string()))?;
            let name = f.name().map_err(|e| bad(e.to_string()))?.to_string();
            let start = f
                .data_start()
                .ok_or_else(|| bad(format!("member '{name}' has no data offset")))?;
            (name, start, f.compressed_size(), f.compression())
        };
        let Some(var_name) = name.strip_suffix(".npy") else {
            continue;
        };
        // Deflate is decoded here by flate2, so the zip crate is built without its codecs.
        let storage = if method == zip::CompressionMethod::Stored {
            Storage::Stored
        } else if method == zip::CompressionMethod::DEFLATE {
            Storage::Deflated
        } else {
            return Err(bad(format!(
                "member '{name}' is compressed with {method:?}; numpy writes stored or deflated members (numpy.savez or numpy.savez_compressed)"
            )));
        };
        let mut f = File::open(path).map_err(io)?;
        f.seek(SeekFrom::Start(data_start)).map_err(io)?;
        let limited = BufReader::new(f.take(compressed_size));
        let header = match storage {
            Storage::Stored => parse_npy_header(&mut { limited }),
            Storage::Deflated => parse_npy_header(&mut flate2::read::DeflateDecoder::new(limited)),
        }
        .map_err(|reason| bad(format!("member '{name}': {reason}")))?;
        let (dtype, big_endian) = npy_type(&header.descr);
        if header.fortran && header.shape.len() > 1 {
            return Err(bad(format!(
                "member '{name}' is stored in Fortran order; save it with numpy.ascontiguousarray(a)"
            )));
        }
        let values: u64 = header.shape.iter().map(|&n| n as u64).product();
        if dtype.is_numeric()
            && storage == Storage::Stored
            && header.len + values * dtype.size() as u64 > compressed_size
        {
            return Err(bad(format!(
                "member '{name}' declares shape {:?} but holds only {compressed_size} bytes",
                header.shape
            )));
        }
        variables.push(Variable {
            name: var_name.to_string(),
            dims: (0..header.shape.len())
                .map(|k| format!("axis{k}"))
                .collect(),
            shape: header.shape.clone(),
            dtype: dtype.clone(),
            attributes: BTreeMap::new(),
        });
        members.push(Member {
            data_start,
            compressed_size,
            storage,
            header_len: header.len,
            dtype,
            big_endian,
            shape: header.shape,
        });
    }
    let file = File::open(path).map_err(io)?;
    Ok(Opened {
        format: Format::Npz,
        dimensions: Vec::new(),
        variables,
        attributes: BTreeMap::new(),
        source: Box::new(NpzSource {
            path: path.to_path_buf(),
            file,
            members,
            stream: None,
            buf: Vec::new(),
        }),
    })
}

impl NpzSource {
    fn io(&self, source: std::io::Error) -> DatasetError {
        DatasetError::Io {
            path: self.path.clone(),
            source,
        }
    }

    /// Fills `self.buf` with `len` bytes from byte `at` of member `m`'s values.
    fn fetch(&mut self, m: usize, at: u64, len: usize) -> Result<(), DatasetError> {
        let member = self.members[m].clone();
        self.buf.resize(len, 0);
        match member.storage {
            Storage::Stored => {
                self.file
                    .seek(SeekFrom::Start(member.data_start + member.header_len + at))
                    .map_err(|e| self.io(e))?;
                let mut buf = std::mem::take(&mut self.buf);
                let r = self.file.read_exact(&mut buf);
                self.buf = buf;
                r.map_err(|e| self.io(e))
            }
            Storage::Deflated => {
                let target = member.header_len + at;
                let reusable = matches!(&self.stream, Some(s) if s.member == m && s.pos <= target);
                if !reusable {
                    let mut f = File::open(&self.path).map_err(|e| self.io(e))?;
                    f.seek(SeekFrom::Start(member.data_start))
                        .map_err(|e| self.io(e))?;
                    let reader = flate2::read::DeflateDecoder::new(BufReader::with_capacity(
                        1 << 16,
                        f.take(member.compressed_size),
                    ));
                    self.stream = Some(Inflating {
                        member: m,
                        pos: 0,
                        reader,
                    });
                }
                let s = self.stream.as_mut().expect("stream just opened");
                let skip = target - s.pos;
                let copied = std::io::copy(&mut (&mut s.reader).take(skip), &mut std::io::sink());
                let r = copied.and_then(|n| {
                    if n < skip {
                        Err(std::io::ErrorKind::UnexpectedEof.into())
                    } else {
                        s.reader.read_exact(&mut self.buf)
                    }
                });
                match r {
                    Ok(()) => {
                        s.pos = target + len as u64;
                        Ok(())
                    }
                    Err(e) => {
                        self.stream = None;
                        Err(self.io(e))
                    }
                }
            }
        }
    }
}

impl Source for NpzSource {
    fn read_slab(
        &mut self,
        var: usize,
        spans: &[Span],
        out: &mut Vec<f64>,
    ) -> Result<(), DatasetError> {
        let m = self.members[var].clone();
        let size = m.dtype.size();
        let mut runs = Vec::new();
        for_each_run(&m.shape, spans, |first, len, stride| {
            runs.push((first, len, stride));
            Ok(())
        })?;
        for (first, len, stride) in runs {
            let bytes = ((len - 1) * stride + 1) * size;
            self.fetch(var, first * size as u64, bytes)?;
            if stride == 1 {
                decode(&m.dtype, m.big_endian, &self.buf, out);
            } else {
                for k in 0..len {
                    let at = k * stride * size;
                    decode(&m.dtype, m.big_endian, &self.buf[at..at + size], out);
                }
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn npy_headers_of_each_version() {
        let h = b"{'descr': '>i2', 'fortran_order': False, 'shape': (3, 4), }    \n";
        let mut v1 = b"\x93NUMPY\x01\x00".to_vec();
        v1.extend((h.len() as u16).to_le_bytes());
        v1.extend(h);
        let p = parse_npy_header(&mut v1.as_slice()).unwrap();
        assert_eq!(
            (p.descr.as_str(), p.fortran, p.shape.clone()),
            (">i2", false, vec![3, 4])
        );
        assert_eq!(p.len, 10 + h.len() as u64);
        assert_eq!(npy_type(&p.descr), (DataType::I16, true));
        let h = b"{'descr': '<f4', 'fortran_order': True, 'shape': (7,), }\n";
        let mut v2 = b"\x93NUMPY\x02\x00".to_vec();
        v2.extend((h.len() as u32).to_le_bytes());
        v2.extend(h);
        let p = parse_npy_header(&mut v2.as_slice()).unwrap();
        assert_eq!(
            (p.fortran, p.shape.clone(), p.len),
            (true, vec![7], 12 + h.len() as u64)
        );
        let h = b"{'descr': '<f8', 'fortran_order': False, 'shape': (), }\n";
        let mut v = b"\x93NUMPY\x01\x00".to_vec();
        v.extend((h.len() as u16).to_le_bytes());
        v.extend(h);
        assert!(parse_npy_header(&mut v.as_slice())
            .unwrap()
            .shape
            .is_empty());
        assert!(matches!(npy_type("<c16").0, DataType::Other(_)));
    }
}
