//! Evaluation sets on disk: a single `.npy` or an `.npz` archive (stored or
//! deflated). Opening a set reads only headers and the labels; samples are
//! streamed in row batches, so memory does not grow with the set's length.

use std::fs::File;
use std::io::{BufReader, Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};

use flate2::read::DeflateDecoder;
use serde::{Deserialize, Serialize};

use super::error::{EngineError, EngineResult};
use super::fit::LargestLabel;
use super::npy::{self, Dtype, Header, Scalar};
use super::slices::Slices;
use crate::report::Key;

/// The array that holds labels in an `.npz`; it never feeds a model input.
pub const LABELS: &str = "labels";
/// The array of class names [C]: strings, never a model input.
pub const CLASS_NAMES: &str = "class_names";
/// The array that assigns each sample to a slice [N]: integers or strings.
pub const SLICES: &str = "slices";

/// Most distinct slice values a set may hold.
pub const MAX_SLICES: usize = 1000;

/// Most arrays an `.npz` may hold.
pub const MAX_ARRAYS: usize = 64;

/// The largest compression ratio of an archive's arrays, past a first
/// allowance that small sets of zeros may use (common practice against
/// decompression bombs; deflate itself reaches about 1000:1).
pub const MAX_RATIO: u64 = 200;
const RATIO_FREE_BYTES: u64 = 64 << 20;

/// Whether an array of this name may feed a model input (the set's own
/// arrays, such as the labels, never do).
pub fn is_model_input(name: Option<&str>) -> bool {
    !matches!(name, Some(LABELS | CLASS_NAMES | SLICES))
}

/// One array as a report or an API answer describes it.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ArrayInfo {
    /// `None` for the single unnamed array of a plain `.npy` file.
    pub name: Option<String>,
    pub dtype: String,
    pub shape: Vec<usize>,
}

/// What an upload check learns about a set.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct DatasetInfo {
    pub samples: usize,
    pub arrays: Vec<ArrayInfo>,
    pub has_labels: bool,
    /// The names of the classes, when the set holds them.
    pub class_names: Option<Vec<String>>,
    /// Distinct slice values, when the set assigns samples to slices.
    pub slice_count: Option<usize>,
    /// Recorded so that a new evaluation's labels are checked against the
    /// models' class count without reading the set again.
    pub largest_label: Option<LargestLabel>,
}

impl Member {
    fn label(&self) -> &str {
        self.name.as_deref().unwrap_or("the array")
    }
}

/// Where one array's bytes live inside the file.
#[derive(Debug, Clone)]
pub(crate) struct Member {
    pub(crate) name: Option<String>,
    pub(crate) header: Header,
    offset: u64,
    stored_len: u64,
    deflated: bool,
}

/// An opened evaluation set: headers checked, labels read.
#[derive(Debug)]
pub struct EvalSet {
    path: PathBuf,
    members: Vec<Member>,
    samples: usize,
    labels: Option<Vec<i64>>,
    class_names: Option<Vec<String>>,
    slices: Option<Slices>,
}

/// Rows of one array, read front to back.
pub(crate) struct RowStream {
    reader: Box<dyn Read + Send>,
    pub(crate) header: Header,
}

impl RowStream {
    pub(crate) fn read(&mut self, rows: usize, buf: &mut Vec<u8>) -> EngineResult<()> {
        npy::read_rows(&mut self.reader, &self.header, rows, buf)
    }
}

fn invalid(msg: impl Into<String>) -> EngineError {
    EngineError::InvalidDataset(msg.into())
}

impl EvalSet {
    pub fn open(path: &Path) -> EngineResult<EvalSet> {
        let mut file = File::open(path).map_err(EngineError::io("opening the evaluation set"))?;
        let mut magic = [0u8; 4];
        let n = file
            .read(&mut magic)
            .map_err(EngineError::io("reading the evaluation set"))?;
        let members = match &magic[..n] {
            [0x93, b'N', b'U', b'M'] => vec![npy_member(path)?],
            [b'P', b'K', 3, 4] | [b'P', b'K', 5, 6] => npz_members(path)?,
            _ => {
                return Err(invalid(
                    "the evaluation set is neither an .npy array nor an .npz archive",
                ));
            }
        };
        let mut set = EvalSet {
            path: path.to_owned(),
            members,
            samples: 0,
            labels: None,
            class_names: None,
            slices: None,
        };
        set.check_dtypes()?;
        set.samples = set.check_lengths()?;
        set.labels = set.read_labels()?;
        set.class_names = set.read_class_names()?;
        set.slices = set.read_slices()?;
        Ok(set)
    }

    /// The upload check of an archive's contents: deflated arrays must be
    /// modest in their compression ratio (a few hundred bytes may not
    /// promise gigabytes), and every array must hold exactly the bytes its
    /// header promises, read to the end — not only as the archive claims.
    pub fn verify(&self) -> EngineResult<()> {
        let compressed: u64 = self.members.iter().map(|m| m.stored_len).sum();
        let promised: u64 = self
            .members
            .iter()
            .map(|m| promised_bytes(&m.header).unwrap_or(u64::MAX))
            .fold(0u64, u64::saturating_add);
        if promised > RATIO_FREE_BYTES && promised / compressed.max(1) > MAX_RATIO {
            return Err(invalid(format!(
                "the archive's {compressed} bytes promise {promised} bytes of arrays, a \
                 compression ratio above {MAX_RATIO}:1; save the set with np.savez"
            )));
        }
        for (ix, m) in self.members.iter().enumerate() {
            let mut stream = self.stream(ix)?;
            let want = promised_bytes(&m.header).unwrap_or(u64::MAX);
            // One byte past the promise is enough to know it holds more.
            let got = std::io::copy(
                &mut (&mut stream.reader).take(want.saturating_add(1)),
                &mut std::io::sink(),
            )
            .map_err(|e| {
                invalid(format!(
                    "array '{}' cannot be read to its end: {e}",
                    m.label()
                ))
            })?;
            if got > want {
                return Err(invalid(format!(
                    "array '{}' holds more data than the {want} bytes its header promises",
                    m.label()
                )));
            }
            if got < want {
                return Err(invalid(format!(
                    "array '{}' holds {got} bytes of data but its header promises {want}",
                    m.label()
                )));
            }
        }
        Ok(())
    }

    /// Strings only in the set's own arrays: a string model input cannot be fed.
    fn check_dtypes(&self) -> EngineResult<()> {
        for m in &self.members {
            let name = m.name.as_deref();
            if m.header.dtype.is_str() && !matches!(name, Some(CLASS_NAMES | SLICES)) {
                return Err(invalid(format!(
                    "array '{}' holds strings; only 'class_names' and 'slices' may",
                    name.unwrap_or("the array")
                )));
            }
        }
        Ok(())
    }

    fn member_named(&self, name: &str) -> Option<usize> {
        self.members
            .iter()
            .position(|m| m.name.as_deref() == Some(name))
    }

    /// A whole 1-D member, read at once (labels, class names, slices).
    fn read_whole(&self, ix: usize) -> EngineResult<Vec<u8>> {
        let mut stream = self.stream(ix)?;
        let rows = self.members[ix].header.shape[0];
        let mut raw = Vec::new();
        stream.read(rows, &mut raw)?;
        Ok(raw)
    }

    fn one_dimensional(&self, ix: usize, what: &str) -> EngineResult<()> {
        let header = &self.members[ix].header;
        if header.shape.len() != 1 {
            return Err(invalid(format!(
                "'{what}' must have one axis, but it has shape {:?}",
                header.shape
            )));
        }
        Ok(())
    }

    fn read_class_names(&self) -> EngineResult<Option<Vec<String>>> {
        let Some(ix) = self.member_named(CLASS_NAMES) else {
            return Ok(None);
        };
        let header = &self.members[ix].header;
        if !header.dtype.is_str() {
            return Err(invalid(format!(
                "'class_names' must be a string array (numpy dtype '<U…'), but it is {}",
                header.dtype.name()
            )));
        }
        self.one_dimensional(ix, CLASS_NAMES)?;
        let names = npy::strings(&self.read_whole(ix)?, header)
            .map_err(|e| invalid(format!("'class_names': {e}")))?;
        Ok(Some(names))
    }

    fn read_slices(&self) -> EngineResult<Option<Slices>> {
        let Some(ix) = self.member_named(SLICES) else {
            return Ok(None);
        };
        let header = &self.members[ix].header;
        self.one_dimensional(ix, SLICES)?;
        let raw = self.read_whole(ix)?;
        let keys: Vec<Key> = if header.dtype.is_str() {
            npy::strings(&raw, header)
                .map_err(|e| invalid(format!("'slices': {e}")))?
                .into_iter()
                .map(Key::Text)
                .collect()
        } else if header.dtype.is_integer() {
            (0..header.shape[0])
                .map(|i| match npy::element(&raw, header, i) {
                    Scalar::Int(v) => i64::try_from(v)
                        .map(Key::Int)
                        .map_err(|_| invalid(format!("slice {v} at sample {i} is too large"))),
                    Scalar::Float(_) => unreachable!("integer dtype checked above"),
                })
                .collect::<EngineResult<_>>()?
        } else {
            return Err(invalid(format!(
                "'slices' must hold integers or strings, but it is {}",
                header.dtype.name()
            )));
        };
        let slices = Slices::new(keys);
        if slices.values.len() > MAX_SLICES {
            return Err(invalid(format!(
                "'slices' holds {} distinct values; at most {MAX_SLICES} are allowed",
                slices.values.len()
            )));
        }
        Ok(Some(slices))
    }

    fn check_lengths(&self) -> EngineResult<usize> {
        if self.members.is_empty() {
            return Err(invalid("the .npz archive holds no arrays"));
        }
        let mut samples = None;
        // Class names count classes, not samples.
        for m in self
            .members
            .iter()
            .filter(|m| m.name.as_deref() != Some(CLASS_NAMES))
        {
            let label = m.name.as_deref().unwrap_or("the array");
            let Some(&n) = m.header.shape.first() else {
                return Err(invalid(format!(
                    "array '{label}' is a scalar: every array needs a first (sample) axis"
                )));
            };
            match samples {
                None => samples = Some((n, label)),
                Some((first, first_label)) if first != n => {
                    return Err(invalid(format!(
                        "arrays differ in length: '{first_label}' has {first} samples, '{label}' has {n}"
                    )));
                }
                _ => {}
            }
        }
        let (n, _) = samples.expect("at least one member");
        if n == 0 {
            return Err(invalid("the evaluation set holds no samples"));
        }
        Ok(n)
    }

    fn read_labels(&self) -> EngineResult<Option<Vec<i64>>> {
        let Some(ix) = self.member_named(LABELS) else {
            return Ok(None);
        };
        let header = &self.members[ix].header;
        if !header.dtype.is_integer() {
            return Err(invalid(format!(
                "'labels' must be an integer array, but it is {}",
                header.dtype.name()
            )));
        }
        if header.shape.len() != 1 {
            return Err(invalid(format!(
                "'labels' must have shape [N], but it has shape {:?}",
                header.shape
            )));
        }
        let raw = self.read_whole(ix)?;
        (0..self.samples)
            .map(|i| match npy::element(&raw, header, i) {
                Scalar::Int(v) if (0..=i64::MAX as i128).contains(&v) => Ok(v as i64),
                Scalar::Int(v) => Err(invalid(format!(
                    "label {v} at sample {i} is negative or too large"
                ))),
                Scalar::Float(_) => unreachable!("integer dtype checked above"),
            })
            .collect::<EngineResult<Vec<_>>>()
            .map(Some)
    }

    pub fn samples(&self) -> usize {
        self.samples
    }

    pub fn labels(&self) -> Option<&[i64]> {
        self.labels.as_deref()
    }

    pub fn class_names(&self) -> Option<&[String]> {
        self.class_names.as_deref()
    }

    pub fn slices(&self) -> Option<&Slices> {
        self.slices.as_ref()
    }

    pub fn info(&self) -> DatasetInfo {
        DatasetInfo {
            samples: self.samples,
            arrays: self
                .members
                .iter()
                .map(|m| ArrayInfo {
                    name: m.name.clone(),
                    dtype: m.header.dtype.name().to_string(),
                    shape: m.header.shape.clone(),
                })
                .collect(),
            has_labels: self.labels.is_some(),
            largest_label: self.labels.as_deref().and_then(largest_label),
            class_names: self.class_names.clone(),
            slice_count: self.slices.as_ref().map(|s| s.values.len()),
        }
    }

    /// A fresh reader positioned at the first sample of member `ix`.
    pub(crate) fn stream(&self, ix: usize) -> EngineResult<RowStream> {
        open_stream(&self.path, &self.members[ix])
    }
}

/// The largest label and the first sample holding it.
fn largest_label(labels: &[i64]) -> Option<LargestLabel> {
    let mut best: Option<LargestLabel> = None;
    for (i, &value) in labels.iter().enumerate() {
        if best.is_none_or(|b| value > b.value) {
            best = Some(LargestLabel {
                value,
                sample: i as u64,
            });
        }
    }
    best
}

fn open_stream(path: &Path, m: &Member) -> EngineResult<RowStream> {
    let mut file = File::open(path).map_err(EngineError::io("opening the evaluation set"))?;
    file.seek(SeekFrom::Start(m.offset))
        .map_err(EngineError::io("seeking in the set"))?;
    let raw = BufReader::with_capacity(1 << 16, file.take(m.stored_len));
    let mut reader: Box<dyn Read + Send> = if m.deflated {
        Box::new(DeflateDecoder::new(raw))
    } else {
        Box::new(raw)
    };
    let header = npy::read_header(&mut reader).map_err(invalid)?;
    Ok(RowStream { reader, header })
}

fn npy_member(path: &Path) -> EngineResult<Member> {
    let len = std::fs::metadata(path)
        .map_err(EngineError::io("reading the set"))?
        .len();
    let mut r = BufReader::new(File::open(path).map_err(EngineError::io("opening the set"))?);
    let header = npy::read_header(&mut r).map_err(invalid)?;
    check_size(&header, len, None)?;
    Ok(Member {
        name: None,
        header,
        offset: 0,
        stored_len: len,
        deflated: false,
    })
}

fn npz_members(path: &Path) -> EngineResult<Vec<Member>> {
    let file = File::open(path).map_err(EngineError::io("opening the set"))?;
    let mut zip = zip::ZipArchive::new(BufReader::new(file))
        .map_err(|e| invalid(format!("the .npz archive cannot be read: {e}")))?;
    if zip.len() > MAX_ARRAYS {
        return Err(invalid(format!(
            "the .npz archive holds {} members; a set holds at most {MAX_ARRAYS} arrays",
            zip.len()
        )));
    }
    let mut members = Vec::with_capacity(zip.len());
    for i in 0..zip.len() {
        let entry = zip
            .by_index_raw(i)
            .map_err(|e| invalid(format!("the .npz archive cannot be read: {e}")))?;
        if entry.is_dir() {
            continue;
        }
        let file_name = entry.name().to_string();
        let Some(name) = file_name.strip_suffix(".npy") else {
            return Err(invalid(format!(
                "'{file_name}' in the archive is not an .npy array"
            )));
        };
        if entry.encrypted() {
            return Err(invalid(format!("array '{name}' is encrypted")));
        }
        let deflated = match entry.compression() {
            zip::CompressionMethod::Stored => false,
            zip::CompressionMethod::Deflated => true,
            other => {
                return Err(invalid(format!(
                    "array '{name}' uses {other} compression; save with np.savez or np.savez_compressed"
                )));
            }
        };
        let member = Member {
            name: Some(name.to_string()),
            header: Header {
                dtype: Dtype::Bool,
                big_endian: false,
                shape: vec![],
            },
            offset: entry.data_start(),
            stored_len: entry.compressed_size(),
            deflated,
        };
        let uncompressed = entry.size();
        members.push((member, uncompressed));
    }
    drop(zip);
    members
        .into_iter()
        .map(|(mut member, uncompressed)| {
            let name = member.name.clone().unwrap_or_default();
            member.header = open_stream(path, &member)
                .map_err(|e| invalid(format!("array '{name}': {e}")))?
                .header;
            check_size(&member.header, uncompressed, Some(&name))?;
            Ok(member)
        })
        .collect()
}

/// The data bytes an NPY header promises; `None` when they overflow.
fn promised_bytes(header: &Header) -> Option<u64> {
    header
        .shape
        .iter()
        .try_fold(header.dtype.size() as u64, |acc, &d| {
            acc.checked_mul(d as u64)
        })
}

/// Refuses arrays whose header promises more data than the file holds, so a
/// truncated upload fails at once rather than mid-evaluation.
fn check_size(header: &Header, available: u64, name: Option<&str>) -> EngineResult<()> {
    match promised_bytes(header) {
        Some(w) if w <= available => Ok(()),
        _ => Err(invalid(format!(
            "array '{}' is truncated: its header promises more data than the file holds",
            name.unwrap_or("the array")
        ))),
    }
}
