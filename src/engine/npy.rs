//! The NPY array format (numpy's `format.py`, versions 1.0 to 3.0): header
//! parsing and element decoding. Data is read row by row from any `Read`, so
//! the same code serves a plain `.npy` file and the stored or deflated members
//! of an `.npz`, and memory never grows with the number of samples.

use std::io::Read;

use tract_onnx::prelude::f16;

use super::error::{EngineError, EngineResult};

/// Element types an evaluation set may hold, spelled as numpy names.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dtype {
    Bool,
    Int8,
    Int16,
    Int32,
    Int64,
    Uint8,
    Uint16,
    Uint32,
    Uint64,
    Float16,
    Float32,
    Float64,
    /// Fixed-width strings: numpy's `U` (UTF-32, 4 bytes a character) or
    /// `S` (bytes), `chars` wide. Only the set's own arrays (class names,
    /// slices) may hold them.
    Str {
        chars: usize,
        wide: bool,
    },
}

const ALL_DTYPES: [Dtype; 12] = [
    Dtype::Bool,
    Dtype::Int8,
    Dtype::Int16,
    Dtype::Int32,
    Dtype::Int64,
    Dtype::Uint8,
    Dtype::Uint16,
    Dtype::Uint32,
    Dtype::Uint64,
    Dtype::Float16,
    Dtype::Float32,
    Dtype::Float64,
];

impl Dtype {
    pub fn name(self) -> &'static str {
        match self {
            Dtype::Bool => "bool",
            Dtype::Int8 => "int8",
            Dtype::Int16 => "int16",
            Dtype::Int32 => "int32",
            Dtype::Int64 => "int64",
            Dtype::Uint8 => "uint8",
            Dtype::Uint16 => "uint16",
            Dtype::Uint32 => "uint32",
            Dtype::Uint64 => "uint64",
            Dtype::Float16 => "float16",
            Dtype::Float32 => "float32",
            Dtype::Float64 => "float64",
            Dtype::Str { .. } => "str",
        }
    }

    /// The dtype of a numpy name such as `float32`, as records spell it.
    pub fn from_name(name: &str) -> Option<Dtype> {
        ALL_DTYPES.into_iter().find(|d| d.name() == name)
    }

    pub fn size(self) -> usize {
        match self {
            Dtype::Bool | Dtype::Int8 | Dtype::Uint8 => 1,
            Dtype::Int16 | Dtype::Uint16 | Dtype::Float16 => 2,
            Dtype::Int32 | Dtype::Uint32 | Dtype::Float32 => 4,
            Dtype::Int64 | Dtype::Uint64 | Dtype::Float64 => 8,
            Dtype::Str { chars, wide: true } => 4 * chars,
            Dtype::Str { chars, wide: false } => chars,
        }
    }

    pub fn is_integer(self) -> bool {
        !matches!(
            self,
            Dtype::Bool | Dtype::Float16 | Dtype::Float32 | Dtype::Float64 | Dtype::Str { .. }
        )
    }

    pub fn is_str(self) -> bool {
        matches!(self, Dtype::Str { .. })
    }

    pub fn is_float(self) -> bool {
        matches!(self, Dtype::Float16 | Dtype::Float32 | Dtype::Float64)
    }

    /// Parses a numpy type string such as `<f4`, `|b1`, `>i8` or `<U12`.
    fn from_descr(descr: &str) -> Result<(Dtype, bool), String> {
        // The first character, whatever its width: a crafted header may
        // start with a multi-byte one.
        let order = descr.chars().next().unwrap_or('?');
        let code = &descr[order.len_utf8().min(descr.len())..];
        let big_endian = match order {
            '<' | '|' | '=' => false,
            '>' => true,
            _ => return Err(format!("unknown byte order in dtype '{descr}'")),
        };
        let dtype = match code {
            "b1" => Dtype::Bool,
            "i1" => Dtype::Int8,
            "i2" => Dtype::Int16,
            "i4" => Dtype::Int32,
            "i8" => Dtype::Int64,
            "u1" => Dtype::Uint8,
            "u2" => Dtype::Uint16,
            "u4" => Dtype::Uint32,
            "u8" => Dtype::Uint64,
            "f2" => Dtype::Float16,
            "f4" => Dtype::Float32,
            "f8" => Dtype::Float64,
            c if c.starts_with('O') => {
                return Err("object arrays are not supported: save plain numeric arrays".into());
            }
            c if c.starts_with('U') || c.starts_with('S') => {
                let chars = c[1..]
                    .parse::<usize>()
                    .ok()
                    .filter(|&n| (1..=4096).contains(&n))
                    .ok_or_else(|| format!("string dtype '{descr}' has no usable width"))?;
                Dtype::Str {
                    chars,
                    wide: c.starts_with('U'),
                }
            }
            _ => return Err(format!("dtype '{descr}' is not supported")),
        };
        // Byte order matters for multi-byte numbers and UTF-32 characters.
        let multi_byte = match dtype {
            Dtype::Str { wide, .. } => wide,
            d => d.size() > 1,
        };
        Ok((dtype, big_endian && multi_byte))
    }
}

/// What an NPY header says about the array that follows it.
#[derive(Debug, Clone, PartialEq)]
pub struct Header {
    pub dtype: Dtype,
    pub big_endian: bool,
    pub shape: Vec<usize>,
}

impl Header {
    /// Bytes in one sample: the product of every axis but the first.
    pub fn row_bytes(&self) -> usize {
        self.shape.iter().skip(1).product::<usize>() * self.dtype.size()
    }
}

const MAGIC: &[u8] = b"\x93NUMPY";

/// Reads the header, leaving `r` at the first data byte.
pub fn read_header(r: &mut impl Read) -> Result<Header, String> {
    let mut lead = [0u8; 8];
    r.read_exact(&mut lead)
        .map_err(|_| "too short to be an NPY array".to_string())?;
    if &lead[..6] != MAGIC {
        return Err("not an NPY array (bad magic bytes)".into());
    }
    let len = match lead[6] {
        1 => {
            let mut b = [0u8; 2];
            r.read_exact(&mut b).map_err(|_| "truncated NPY header")?;
            u16::from_le_bytes(b) as usize
        }
        2 | 3 => {
            let mut b = [0u8; 4];
            r.read_exact(&mut b).map_err(|_| "truncated NPY header")?;
            u32::from_le_bytes(b) as usize
        }
        v => return Err(format!("NPY format version {v} is not supported")),
    };
    if len > 1 << 20 {
        return Err("NPY header is implausibly large".into());
    }
    let mut text = vec![0u8; len];
    r.read_exact(&mut text)
        .map_err(|_| "truncated NPY header")?;
    let text = String::from_utf8_lossy(&text);
    parse_header_dict(&text)
}

/// Parses the Python dict literal of an NPY header, e.g.
/// `{'descr': '<f4', 'fortran_order': False, 'shape': (3, 4), }`.
fn parse_header_dict(text: &str) -> Result<Header, String> {
    let descr = dict_value(text, "descr")?;
    let descr = descr
        .strip_prefix('\'')
        .and_then(|d| d.strip_suffix('\''))
        .ok_or_else(|| "structured (record) arrays are not supported".to_string())?;
    let (dtype, big_endian) = Dtype::from_descr(descr)?;
    let fortran = dict_value(text, "fortran_order")?;
    let shape_text = dict_value(text, "shape")?;
    let inner = shape_text
        .strip_prefix('(')
        .and_then(|s| s.strip_suffix(')'))
        .ok_or_else(|| format!("cannot read the array shape '{shape_text}'"))?;
    let shape = inner
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| {
            s.parse::<usize>()
                .map_err(|_| format!("bad dimension '{s}' in the array shape"))
        })
        .collect::<Result<Vec<_>, _>>()?;
    if fortran == "True" && shape.iter().filter(|&&d| d > 1).count() > 1 {
        return Err(
            "Fortran-ordered arrays are not supported: save with np.ascontiguousarray".into(),
        );
    }
    Ok(Header {
        dtype,
        big_endian,
        shape,
    })
}

/// The raw text of one value in the header dict (a string, bool or tuple).
fn dict_value<'a>(text: &'a str, key: &str) -> Result<&'a str, String> {
    let pat = format!("'{key}':");
    let start = text
        .find(&pat)
        .ok_or_else(|| format!("NPY header has no '{key}'"))?
        + pat.len();
    let rest = text[start..].trim_start();
    let end = if rest.starts_with('(') {
        rest.find(')').map(|i| i + 1)
    } else if let Some(body) = rest.strip_prefix('\'') {
        body.find('\'').map(|i| i + 2)
    } else {
        rest.find([',', '}'])
    }
    .ok_or_else(|| format!("NPY header value for '{key}' is unterminated"))?;
    Ok(rest[..end].trim())
}

/// Reads exactly `rows` samples of raw bytes into `buf` (resized to fit).
pub fn read_rows(
    r: &mut impl Read,
    header: &Header,
    rows: usize,
    buf: &mut Vec<u8>,
) -> EngineResult<()> {
    buf.resize(rows * header.row_bytes(), 0);
    r.read_exact(buf).map_err(|e| {
        EngineError::InvalidDataset(format!("the array data ends early or cannot be read: {e}"))
    })
}

/// An NPY 1.0 header for a little-endian C-order array of numpy type
/// `descr` (e.g. `<f8`), padded so the data starts on a 64-byte boundary, as
/// numpy writes it.
pub fn header_bytes(descr: &str, shape: &[usize]) -> Vec<u8> {
    let dims: String = shape.iter().map(|d| format!("{d}, ")).collect();
    let dims = if shape.len() == 1 {
        dims.trim_end().to_string()
    } else {
        dims.trim_end_matches(", ").to_string()
    };
    let dict = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': ({dims}), }}");
    let pad = (64 - (MAGIC.len() + 4 + dict.len() + 1) % 64) % 64;
    let header = format!("{dict}{}\n", " ".repeat(pad));
    let mut out = MAGIC.to_vec();
    out.extend_from_slice(&[1, 0]);
    out.extend_from_slice(&(header.len() as u16).to_le_bytes());
    out.extend_from_slice(header.as_bytes());
    out
}

/// A whole numeric `.npy` file as f64, with its shape (for cached scores and
/// reference fixtures; evaluation sets are streamed instead).
pub fn read_f64(path: &std::path::Path) -> EngineResult<(Vec<usize>, Vec<f64>)> {
    let file = std::fs::File::open(path).map_err(EngineError::io("opening an NPY file"))?;
    let mut r = std::io::BufReader::new(file);
    let header = read_header(&mut r).map_err(EngineError::InvalidDataset)?;
    let rows = header.shape.first().copied().unwrap_or(1);
    let mut raw = Vec::new();
    read_rows(&mut r, &header, rows, &mut raw)?;
    let count = raw.len() / header.dtype.size();
    let values = (0..count)
        .map(|i| match element(&raw, &header, i) {
            Scalar::Int(v) => v as f64,
            Scalar::Float(v) => v,
        })
        .collect();
    Ok((header.shape, values))
}

/// One element decoded into the widest type of its kind.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Scalar {
    Int(i128),
    Float(f64),
}

/// Decodes element `i` of a raw buffer.
pub fn element(raw: &[u8], header: &Header, i: usize) -> Scalar {
    let size = header.dtype.size();
    let mut b = [0u8; 8];
    b[..size].copy_from_slice(&raw[i * size..(i + 1) * size]);
    if header.big_endian {
        b[..size].reverse();
    }
    let le2 = [b[0], b[1]];
    let le4 = [b[0], b[1], b[2], b[3]];
    match header.dtype {
        Dtype::Bool => Scalar::Int((b[0] != 0) as i128),
        Dtype::Int8 => Scalar::Int(b[0] as i8 as i128),
        Dtype::Uint8 => Scalar::Int(b[0] as i128),
        Dtype::Int16 => Scalar::Int(i16::from_le_bytes(le2) as i128),
        Dtype::Uint16 => Scalar::Int(u16::from_le_bytes(le2) as i128),
        Dtype::Int32 => Scalar::Int(i32::from_le_bytes(le4) as i128),
        Dtype::Uint32 => Scalar::Int(u32::from_le_bytes(le4) as i128),
        Dtype::Int64 => Scalar::Int(i64::from_le_bytes(b) as i128),
        Dtype::Uint64 => Scalar::Int(u64::from_le_bytes(b) as i128),
        Dtype::Float16 => Scalar::Float(f16::from_bits(u16::from_le_bytes(le2)).to_f64()),
        Dtype::Float32 => Scalar::Float(f32::from_le_bytes(le4) as f64),
        Dtype::Float64 => Scalar::Float(f64::from_le_bytes(b)),
        Dtype::Str { .. } => unreachable!("string arrays are decoded by `strings`"),
    }
}

/// The strings of a raw buffer of fixed-width string elements, with numpy's
/// trailing NULs removed.
pub fn strings(raw: &[u8], header: &Header) -> Result<Vec<String>, String> {
    let Dtype::Str { chars, wide } = header.dtype else {
        return Err(format!("{} is not a string dtype", header.dtype.name()));
    };
    let width = header.dtype.size();
    raw.chunks_exact(width.max(1))
        .map(|item| {
            let text: String = if wide {
                let mut out = String::with_capacity(chars);
                for unit in item.chunks_exact(4) {
                    let b = [unit[0], unit[1], unit[2], unit[3]];
                    let code = if header.big_endian {
                        u32::from_be_bytes(b)
                    } else {
                        u32::from_le_bytes(b)
                    };
                    out.push(
                        char::from_u32(code)
                            .ok_or_else(|| format!("{code:#x} is not a character"))?,
                    );
                }
                out
            } else {
                String::from_utf8(item.to_vec())
                    .map_err(|_| "a byte string that is not UTF-8".to_string())?
            };
            Ok(text.trim_end_matches('\0').to_string())
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn npy(header: &str, data: &[u8]) -> Vec<u8> {
        let mut v = MAGIC.to_vec();
        v.extend([1, 0]);
        v.extend((header.len() as u16).to_le_bytes());
        v.extend(header.as_bytes());
        v.extend(data);
        v
    }

    #[test]
    fn a_version_one_header_gives_dtype_and_shape() {
        let bytes = npy(
            "{'descr': '<f4', 'fortran_order': False, 'shape': (3, 4), }\n",
            &[],
        );
        let h = read_header(&mut bytes.as_slice()).unwrap();
        assert_eq!(
            h,
            Header {
                dtype: Dtype::Float32,
                big_endian: false,
                shape: vec![3, 4]
            }
        );
        assert_eq!(h.row_bytes(), 16);
    }

    #[test]
    fn a_one_dimensional_shape_has_a_trailing_comma() {
        let bytes = npy(
            "{'descr': '|b1', 'fortran_order': False, 'shape': (7,), }",
            &[],
        );
        assert_eq!(read_header(&mut bytes.as_slice()).unwrap().shape, vec![7]);
    }

    #[test]
    fn written_headers_read_back_and_align_the_data() {
        for shape in [vec![7], vec![3, 4], vec![2, 3, 16, 16]] {
            let bytes = header_bytes("<f4", &shape);
            assert_eq!(bytes.len() % 64, 0, "numpy aligns the data to 64 bytes");
            let h = read_header(&mut bytes.as_slice()).unwrap();
            assert_eq!(
                h,
                Header {
                    dtype: Dtype::Float32,
                    big_endian: false,
                    shape
                }
            );
        }
    }

    #[test]
    fn a_dtype_starting_with_a_multi_byte_character_is_refused_not_a_panic() {
        let bytes = npy(
            "{'descr': '\u{e9}f4', 'fortran_order': False, 'shape': (2,), }",
            &[],
        );
        let err = read_header(&mut bytes.as_slice()).unwrap_err();
        assert!(err.contains("byte order"), "{err}");
    }

    #[test]
    fn unicode_strings_decode_without_their_padding() {
        // numpy writes '<U5' as five little-endian UTF-32 units, NUL-padded.
        let h = Header {
            dtype: Dtype::Str {
                chars: 5,
                wide: true,
            },
            big_endian: false,
            shape: vec![2],
        };
        let mut raw = Vec::new();
        for word in ["ice", "géo"] {
            let mut units: Vec<u32> = word.chars().map(|c| c as u32).collect();
            units.resize(5, 0);
            raw.extend(units.iter().flat_map(|u| u.to_le_bytes()));
        }
        assert_eq!(strings(&raw, &h).unwrap(), vec!["ice", "géo"]);
    }

    #[test]
    fn object_arrays_are_refused_with_a_reason() {
        let bytes = npy(
            "{'descr': '|O', 'fortran_order': False, 'shape': (2,), }",
            &[],
        );
        let err = read_header(&mut bytes.as_slice()).unwrap_err();
        assert!(err.contains("object arrays"), "{err}");
    }

    #[test]
    fn big_endian_elements_are_swapped() {
        let h = Header {
            dtype: Dtype::Int32,
            big_endian: true,
            shape: vec![1],
        };
        assert_eq!(element(&[0, 0, 1, 2], &h, 0), Scalar::Int(258));
    }

    #[test]
    fn half_precision_decodes_exactly() {
        // 0x3c00 = 1.0, 0xc000 = -2.0, 0x0001 = 2^-24 (IEEE 754-2008 binary16).
        let h = Header {
            dtype: Dtype::Float16,
            big_endian: false,
            shape: vec![3],
        };
        let raw = [0x00, 0x3c, 0x00, 0xc0, 0x01, 0x00];
        assert_eq!(element(&raw, &h, 0), Scalar::Float(1.0));
        assert_eq!(element(&raw, &h, 1), Scalar::Float(-2.0));
        assert_eq!(element(&raw, &h, 2), Scalar::Float(2f64.powi(-24)));
    }

    #[test]
    fn random_bytes_are_not_an_array() {
        assert!(read_header(&mut [7u8; 40].as_slice()).is_err());
    }
}
