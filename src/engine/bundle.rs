//! Models whose weights are ONNX external data, sent as a zip bundle: the
//! `.onnx` file and the data files its tensors name. The bundle is read here,
//! in the engine's child, and never unpacked to disk: every `location` is
//! checked to name a regular file of the bundle (relative, no `..`, no link),
//! every range to lie inside that file, and the bytes are copied into the
//! tensors, so the stored model is self-contained and the same weights
//! exported twice are one model.

use std::collections::HashMap;
use std::io::Read;
use std::path::{Path, PathBuf};

use prost::Message;
use tract_onnx::pb;

use super::error::{EngineError, EngineResult};

/// Protobuf refuses messages of 2 GiB or more, so a model is self-contained
/// only below this size.
pub const MAX_SELF_CONTAINED: u64 = (1 << 31) - 1;

/// A bundle's model with its data inlined.
#[derive(Debug)]
pub struct Inlined {
    /// The self-contained model; its serialization is under
    /// `MAX_SELF_CONTAINED`.
    pub model: pb::ModelProto,
    /// Bytes that the bundle held outside the graph.
    pub external_data: u64,
}

fn invalid(msg: impl Into<String>) -> EngineError {
    EngineError::InvalidModel(msg.into())
}

/// Whether a tensor keeps its bytes outside the graph.
pub(crate) fn is_external(t: &pb::TensorProto) -> bool {
    t.data_location == Some(pb::tensor_proto::DataLocation::External as i32)
        || !t.external_data.is_empty()
}

/// Calls `f` on every tensor of the model, at any depth: initializers,
/// sparse initializers, attributes of nodes in the graph, its subgraphs,
/// local functions and training graphs.
pub(crate) fn for_each_tensor(
    model: &mut pb::ModelProto,
    f: &mut impl FnMut(&mut pb::TensorProto) -> EngineResult<()>,
) -> EngineResult<()> {
    if let Some(g) = model.graph.as_mut() {
        graph_tensors(g, f)?;
    }
    for function in &mut model.functions {
        nodes_tensors(&mut function.node, f)?;
    }
    for training in &mut model.training_info {
        for g in training
            .initialization
            .iter_mut()
            .chain(training.algorithm.iter_mut())
        {
            graph_tensors(g, f)?;
        }
    }
    Ok(())
}

fn sparse_tensors(
    s: &mut pb::SparseTensorProto,
    f: &mut impl FnMut(&mut pb::TensorProto) -> EngineResult<()>,
) -> EngineResult<()> {
    for t in s.values.iter_mut().chain(s.indices.iter_mut()) {
        f(t)?;
    }
    Ok(())
}

fn graph_tensors(
    g: &mut pb::GraphProto,
    f: &mut impl FnMut(&mut pb::TensorProto) -> EngineResult<()>,
) -> EngineResult<()> {
    for t in &mut g.initializer {
        f(t)?;
    }
    for s in &mut g.sparse_initializer {
        sparse_tensors(s, f)?;
    }
    nodes_tensors(&mut g.node, f)
}

fn nodes_tensors(
    nodes: &mut [pb::NodeProto],
    f: &mut impl FnMut(&mut pb::TensorProto) -> EngineResult<()>,
) -> EngineResult<()> {
    for node in nodes {
        for attr in &mut node.attribute {
            for t in attr.t.iter_mut().chain(attr.tensors.iter_mut()) {
                f(t)?;
            }
            for s in attr
                .sparse_tensor
                .iter_mut()
                .chain(attr.sparse_tensors.iter_mut())
            {
                sparse_tensors(s, f)?;
            }
            for g in attr.g.iter_mut().chain(attr.graphs.iter_mut()) {
                graph_tensors(g, f)?;
            }
        }
    }
    Ok(())
}

/// A path inside the bundle, as its components; `None` when it is absolute
/// or climbs out with `..`. Both `/` and `\\` separate components, whatever
/// the host, so that a client and the service read a location alike.
pub(crate) fn inside(path: &str) -> Option<PathBuf> {
    if path.starts_with(['/', '\\']) || path.as_bytes().get(1) == Some(&b':') {
        return None;
    }
    let mut out = PathBuf::new();
    for part in path.split(['/', '\\']) {
        match part {
            "" | "." => {}
            ".." => return None,
            part => out.push(part),
        }
    }
    (!out.as_os_str().is_empty()).then_some(out)
}

/// Entries that archivers add beside the files (macOS resource forks).
fn archiver_litter(name: &str) -> bool {
    name.starts_with("__MACOSX/")
        || name
            .rsplit(['/', '\\'])
            .next()
            .is_some_and(|base| base.starts_with("._"))
}

/// What a zip entry is, as far as the bundle's checks go.
struct Entry {
    index: usize,
    size: u64,
}

/// The bundle's regular files by their path inside it, and its one model.
struct Contents {
    files: HashMap<PathBuf, Entry>,
    model: PathBuf,
}

fn open(bundle: &Path) -> EngineResult<zip::ZipArchive<std::fs::File>> {
    let file = std::fs::File::open(bundle).map_err(EngineError::io("opening the bundle"))?;
    zip::ZipArchive::new(file).map_err(|e| invalid(format!("the body is not a zip bundle: {e}")))
}

/// Lists the bundle, refusing links, names that leave it, and any count of
/// `.onnx` files other than one.
fn contents(zip: &mut zip::ZipArchive<std::fs::File>) -> EngineResult<Contents> {
    let mut files = HashMap::new();
    let mut models = Vec::new();
    for index in 0..zip.len() {
        let entry = zip
            .by_index_raw(index)
            .map_err(|e| invalid(format!("the zip bundle is damaged: {e}")))?;
        let name = entry.name().to_string();
        if entry.is_dir() || archiver_litter(&name) {
            continue;
        }
        let path = inside(&name).ok_or_else(|| {
            invalid(format!(
                "the zip bundle holds '{name}', a path outside the bundle; entries must be \
                 relative paths without '..'"
            ))
        })?;
        if entry.is_symlink() {
            return Err(invalid(format!(
                "the zip bundle holds '{name}' as a symbolic link; put the file itself in the \
                 bundle"
            )));
        }
        if name.to_ascii_lowercase().ends_with(".onnx") {
            models.push(path.clone());
        }
        let size = entry.size();
        if files.insert(path, Entry { index, size }).is_some() {
            return Err(invalid(format!("the zip bundle holds '{name}' twice")));
        }
    }
    match models.len() {
        1 => Ok(Contents {
            files,
            model: models.pop().expect("one model"),
        }),
        0 => Err(invalid(
            "the zip bundle holds no .onnx file; it must hold exactly one, with the data files \
             its tensors name",
        )),
        n => Err(invalid(format!(
            "the zip bundle holds {n} .onnx files; it must hold exactly one"
        ))),
    }
}

fn read_entry(zip: &mut zip::ZipArchive<std::fs::File>, entry: &Entry) -> EngineResult<Vec<u8>> {
    let mut file = zip
        .by_index(entry.index)
        .map_err(|e| invalid(format!("the zip bundle is damaged: {e}")))?;
    if entry.size > MAX_SELF_CONTAINED {
        return Err(too_large());
    }
    // The header's size is a claim: read at most one byte past it, and let
    // the buffer grow with what really arrives.
    let mut bytes = Vec::new();
    (&mut file)
        .take(entry.size + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| invalid(format!("the zip bundle is damaged: {e}")))?;
    if bytes.len() as u64 != entry.size {
        return Err(invalid(format!(
            "the zip bundle is damaged: '{}' holds {} bytes, its header says {}",
            file.name(),
            bytes.len(),
            entry.size
        )));
    }
    Ok(bytes)
}

/// Where one tensor's bytes are.
pub(crate) struct Reference {
    pub(crate) location: String,
    offset: u64,
    length: Option<u64>,
}

/// The external-data entries of a tensor, read.
pub(crate) fn reference(t: &pb::TensorProto) -> EngineResult<Reference> {
    let tensor = &t.name;
    let number = |key: &str, value: &str| {
        value.parse::<u64>().map_err(|_| {
            invalid(format!(
                "tensor '{tensor}': external data {key} '{value}' is not a whole number of bytes"
            ))
        })
    };
    let (mut location, mut offset, mut length) = (None, 0, None);
    for kv in &t.external_data {
        match kv.key.as_str() {
            "location" => location = Some(kv.value.clone()),
            "offset" => offset = number("offset", &kv.value)?,
            "length" => length = Some(number("length", &kv.value)?),
            _ => {}
        }
    }
    let location = location.ok_or_else(|| {
        invalid(format!(
            "tensor '{tensor}' is stored as external data but names no location"
        ))
    })?;
    Ok(Reference {
        location,
        offset,
        length,
    })
}

/// Bytes of one element of an ONNX data type, for the types of fixed width.
fn element_bytes(data_type: i32) -> Option<u64> {
    use pb::tensor_proto::DataType as D;
    Some(match D::try_from(data_type).ok()? {
        D::Uint8 | D::Int8 | D::Bool => 1,
        D::Uint16 | D::Int16 | D::Float16 | D::Bfloat16 => 2,
        D::Float | D::Int32 | D::Uint32 => 4,
        D::Double | D::Int64 | D::Uint64 | D::Complex64 => 8,
        D::Complex128 => 16,
        _ => return None,
    })
}

/// Reads the bundle at `path` and returns its model with every external
/// tensor's bytes inlined.
pub fn inline(path: &Path) -> EngineResult<Inlined> {
    let mut zip = open(path)?;
    let Contents { files, model } = contents(&mut zip)?;
    let onnx = read_entry(&mut zip, &files[&model])?;
    let mut proto = pb::ModelProto::decode(onnx.as_slice()).map_err(|e| {
        invalid(format!(
            "'{}' in the bundle is not an ONNX model: {e}",
            model.display()
        ))
    })?;
    drop(onnx);
    let base = model.parent().map(Path::to_path_buf).unwrap_or_default();
    let mut data: HashMap<PathBuf, Vec<u8>> = HashMap::new();
    let mut external_data = 0u64;
    // Data files are read whole; their sizes together are bounded too, or
    // many entries sharing one compressed stream could each claim 2 GiB.
    let mut read_total = 0u64;
    for_each_tensor(&mut proto, &mut |t| {
        if !is_external(t) {
            return Ok(());
        }
        let r = reference(t)?;
        let tensor = t.name.clone();
        let at = inside(&r.location).map(|p| base.join(p)).ok_or_else(|| {
            invalid(format!(
                "tensor '{tensor}': external data location '{}' is not a relative path inside \
                 the bundle (absolute paths and '..' are refused)",
                r.location
            ))
        })?;
        let entry = files.get(&at).ok_or_else(|| {
            invalid(format!(
                "tensor '{tensor}': external data location '{}' is not in the bundle",
                r.location
            ))
        })?;
        let end = match r.length {
            Some(n) => r.offset.checked_add(n),
            None => Some(entry.size),
        };
        let end = end
            .filter(|&end| r.offset <= entry.size && end <= entry.size && r.offset <= end)
            .ok_or_else(|| {
                invalid(format!(
                    "tensor '{tensor}': external data at offset {} with length {} lies outside \
                     '{}', which holds {} bytes",
                    r.offset,
                    r.length
                        .map_or_else(|| "to the end".to_string(), |n| n.to_string()),
                    r.location,
                    entry.size
                ))
            })?;
        let length = end - r.offset;
        if let Some(width) = element_bytes(t.data_type) {
            let elements = t
                .dims
                .iter()
                .try_fold(1u64, |n, &d| n.checked_mul(u64::try_from(d).ok()?));
            if elements.and_then(|n| n.checked_mul(width)) != Some(length) {
                return Err(invalid(format!(
                    "tensor '{tensor}': its shape {:?} needs {} bytes but its external data \
                     holds {length}",
                    t.dims,
                    elements
                        .and_then(|n| n.checked_mul(width))
                        .map_or_else(|| "more than 2^64".to_string(), |n| n.to_string()),
                )));
            }
        }
        external_data += length;
        if external_data > MAX_SELF_CONTAINED {
            return Err(too_large());
        }
        if !data.contains_key(&at) {
            read_total += entry.size;
            if read_total > MAX_SELF_CONTAINED {
                return Err(too_large());
            }
            let bytes = read_entry(&mut zip, entry)?;
            data.insert(at.clone(), bytes);
        }
        let bytes = &data[&at];
        t.raw_data = bytes[r.offset as usize..end as usize].to_vec();
        t.external_data.clear();
        t.data_location = None;
        Ok(())
    })?;
    drop(data);
    if proto.encoded_len() as u64 > MAX_SELF_CONTAINED {
        return Err(too_large());
    }
    Ok(Inlined {
        model: proto,
        external_data,
    })
}

fn too_large() -> EngineError {
    invalid(format!(
        "the model is over {} bytes once its data is inlined; Proctor keeps bundles only up to \
         protobuf's 2 GiB limit",
        MAX_SELF_CONTAINED
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paths_inside_the_bundle_are_relative_and_never_climb() {
        assert_eq!(inside("w.bin"), Some(PathBuf::from("w.bin")));
        assert_eq!(inside("./a/w.bin"), Some(PathBuf::from("a/w.bin")));
        assert_eq!(inside("a/../w.bin"), None);
        assert_eq!(inside("../w.bin"), None);
        assert_eq!(inside("/etc/hostname"), None);
        assert_eq!(inside(""), None);
        assert_eq!(inside("."), None);
        assert_eq!(inside("a\\w.bin"), Some(PathBuf::from("a/w.bin")));
        assert_eq!(inside("a\\..\\w.bin"), None);
        assert_eq!(inside("\\w.bin"), None);
        assert_eq!(inside("C:w.bin"), None);
    }

    /// A bundle of `files` (name, bytes) and `links` (name, target).
    fn bundle_of(files: &[(&str, &[u8])], links: &[(&str, &str)]) -> tempfile::NamedTempFile {
        use std::io::Write;
        let out = tempfile::NamedTempFile::new().unwrap();
        let mut zip = zip::ZipWriter::new(out.reopen().unwrap());
        let options = zip::write::SimpleFileOptions::default();
        for (name, bytes) in files {
            zip.start_file(*name, options).unwrap();
            zip.write_all(bytes).unwrap();
        }
        for (name, target) in links {
            zip.add_symlink(*name, *target, options).unwrap();
        }
        zip.finish().unwrap();
        out
    }

    fn refusal(bundle: &tempfile::NamedTempFile) -> String {
        match inline(bundle.path()) {
            Err(EngineError::InvalidModel(m)) => m,
            other => panic!("expected a refusal, got {other:?}"),
        }
    }

    #[test]
    fn a_link_in_the_bundle_is_refused_whatever_it_points_at() {
        let b = bundle_of(&[("m.onnx", b"")], &[("w.bin", "/etc/hostname")]);
        assert!(refusal(&b).contains("symbolic link"), "{}", refusal(&b));
    }

    #[test]
    fn an_entry_named_outside_the_bundle_is_refused() {
        let b = bundle_of(&[("m.onnx", b""), ("../w.bin", b"x")], &[]);
        assert!(
            refusal(&b).contains("outside the bundle"),
            "{}",
            refusal(&b)
        );
    }

    #[test]
    fn a_bundle_holds_exactly_one_model() {
        let none = bundle_of(&[("w.bin", b"x")], &[]);
        assert!(refusal(&none).contains("no .onnx"), "{}", refusal(&none));
        let two = bundle_of(&[("a.onnx", b""), ("b/a.onnx", b"")], &[]);
        assert!(refusal(&two).contains("2 .onnx"), "{}", refusal(&two));
        // A resource fork beside the model is not a second model (an empty
        // file decodes as an empty model; the engine refuses it later).
        let fork = bundle_of(&[("a.onnx", b""), ("__MACOSX/._a.onnx", b"x")], &[]);
        assert!(inline(fork.path()).is_ok());
    }

    #[test]
    fn resource_forks_are_not_files_of_the_bundle() {
        assert!(archiver_litter("__MACOSX/._teacher.onnx"));
        assert!(archiver_litter("export/._teacher.onnx"));
        assert!(!archiver_litter("export/teacher.onnx"));
    }

    #[test]
    fn element_widths_follow_the_onnx_data_types() {
        // onnx.proto: FLOAT = 1, UINT8 = 2, INT64 = 7, STRING = 8, DOUBLE = 11.
        assert_eq!(element_bytes(1), Some(4));
        assert_eq!(element_bytes(2), Some(1));
        assert_eq!(element_bytes(7), Some(8));
        assert_eq!(element_bytes(8), None);
        assert_eq!(element_bytes(11), Some(8));
    }
}
