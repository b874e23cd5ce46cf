//! A model whose weights are ONNX external data is sent as a zip bundle:
//! its `.onnx` file and the data files its tensors name, read from the
//! model's folder and nothing else. The bundle is inlined here as the
//! service will inline it, so the client knows the stored model's SHA-256
//! before sending anything.

use std::collections::BTreeSet;
use std::io::Write;
use std::path::{Path, PathBuf};

use prost::Message;
use sha2::{Digest, Sha256};
use tract_onnx::pb;

use crate::engine::EngineError;
use crate::engine::bundle::{for_each_tensor, inline, inside, is_external, reference};

/// A bundle built from a model's folder.
pub struct Bundle {
    pub zip: tempfile::TempPath,
    /// The SHA-256 the service gives the self-contained model.
    pub sha256: String,
}

/// The data files a model names, relative to its folder, in path order;
/// none for a self-contained model (or for bytes that are not ONNX at all,
/// which the service will refuse in its own words).
fn named_files(model: &Path) -> Result<BTreeSet<PathBuf>, String> {
    let bytes =
        std::fs::read(model).map_err(|e| format!("cannot read {}: {e}", model.display()))?;
    let Ok(mut proto) = pb::ModelProto::decode(bytes.as_slice()) else {
        return Ok(BTreeSet::new());
    };
    let mut files = BTreeSet::new();
    for_each_tensor(&mut proto, &mut |t| {
        if !is_external(t) {
            return Ok(());
        }
        let location = reference(t)?.location;
        let rel = inside(&location).ok_or_else(|| {
            EngineError::InvalidModel(format!(
                "tensor '{}' names external data at '{location}', which is not a relative path \
                 inside the model's folder",
                t.name
            ))
        })?;
        files.insert(rel);
        Ok(())
    })
    .map_err(|e| format!("{}: {e}", model.display()))?;
    Ok(files)
}

/// The bundle for `model` when its tensors name external data, else `None`.
pub fn bundle_if_needed(model: &Path) -> Result<Option<Bundle>, String> {
    let files = named_files(model)?;
    if files.is_empty() {
        return Ok(None);
    }
    let folder = model.parent().unwrap_or(Path::new("."));
    let tmp = tempfile::Builder::new()
        .prefix("proctor-bundle-")
        .suffix(".zip")
        .tempfile()
        .map_err(|e| format!("cannot make a temporary bundle: {e}"))?;
    let (file, zip_path) = tmp.into_parts();
    let mut zip = zip::ZipWriter::new(std::io::BufWriter::new(file));
    let stored = zip::write::SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Stored)
        .large_file(true);
    // The service takes the one entry ending in .onnx as the model.
    let model_name = format!(
        "{}.onnx",
        model
            .file_stem()
            .map_or_else(|| "model".into(), |n| n.to_string_lossy().into_owned())
    );
    if let Some(clash) = files
        .iter()
        .find(|f| f.to_string_lossy().to_ascii_lowercase().ends_with(".onnx"))
    {
        return Err(format!(
            "{}: its external data file '{}' ends in .onnx, which a bundle keeps for the model \
             itself; rename the data file",
            model.display(),
            clash.display()
        ));
    }
    let root = std::fs::canonicalize(folder)
        .map_err(|e| format!("cannot read {}: {e}", folder.display()))?;
    let mut add = |name: &str, from: &Path| -> Result<(), String> {
        let meta = std::fs::symlink_metadata(from)
            .map_err(|e| format!("cannot read {}: {e}", from.display()))?;
        // Neither the file nor a folder on its way may be a link that
        // leads out of the model's folder.
        let real = std::fs::canonicalize(from)
            .map_err(|e| format!("cannot read {}: {e}", from.display()))?;
        if !meta.is_file() || !real.starts_with(&root) {
            return Err(format!(
                "{} is not a regular file inside the model's folder (links are not followed); \
                 the model names it as external data",
                from.display()
            ));
        }
        let mut src = std::fs::File::open(from)
            .map_err(|e| format!("cannot read {}: {e}", from.display()))?;
        zip.start_file(name, stored)
            .and_then(|_| std::io::copy(&mut src, &mut zip).map_err(Into::into))
            .map_err(|e| format!("cannot write the bundle: {e}"))?;
        Ok(())
    };
    add(&model_name, model)?;
    for rel in &files {
        let name = rel.to_string_lossy().replace('\\', "/");
        add(&name, &folder.join(rel))?;
    }
    let mut out = zip
        .finish()
        .map_err(|e| format!("cannot write the bundle: {e}"))?;
    out.flush()
        .map_err(|e| format!("cannot write the bundle: {e}"))?;
    drop(out);
    let inlined = inline(&zip_path).map_err(|e| format!("{}: {e}", model.display()))?;
    let sha256 = hex::encode(Sha256::digest(inlined.model.encode_to_vec()));
    Ok(Some(Bundle {
        zip: zip_path,
        sha256,
    }))
}
