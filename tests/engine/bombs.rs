//! Compressed-set bombs and lying archives are refused at upload, from the
//! archive's own numbers and from the bytes actually read, without
//! inflating what they promise.

use std::io::Write;

use proctor::engine::dataset::{MAX_ARRAYS, MAX_RATIO};
use proctor::engine::{EngineError, inspect_dataset};
use zip::write::SimpleFileOptions;

/// An NPY version 1.0 header for a little-endian float32 array (the NPY
/// format as numpy documents it: magic, version, header length, a Python
/// dict literal padded with spaces to a multiple of 64, and a newline).
fn npy_header(shape: &[usize]) -> Vec<u8> {
    let dims: Vec<String> = shape.iter().map(usize::to_string).collect();
    let shape = if dims.len() == 1 {
        format!("({},)", dims[0])
    } else {
        format!("({})", dims.join(", "))
    };
    let mut dict = format!("{{'descr': '<f4', 'fortran_order': False, 'shape': {shape}, }}");
    while (10 + dict.len() + 1) % 64 != 0 {
        dict.push(' ');
    }
    dict.push('\n');
    let mut out = b"\x93NUMPY\x01\x00".to_vec();
    out.extend((dict.len() as u16).to_le_bytes());
    out.extend(dict.as_bytes());
    out
}

/// Writes an archive of (member name, bytes), deflated or stored.
fn npz(members: &[(String, Vec<u8>)], deflated: bool) -> tempfile::NamedTempFile {
    let file = tempfile::NamedTempFile::new().unwrap();
    let mut zip = zip::ZipWriter::new(file.reopen().unwrap());
    let method = if deflated {
        zip::CompressionMethod::Deflated
    } else {
        zip::CompressionMethod::Stored
    };
    for (name, bytes) in members {
        zip.start_file(
            name,
            SimpleFileOptions::default().compression_method(method),
        )
        .unwrap();
        zip.write_all(bytes).unwrap();
    }
    zip.finish().unwrap();
    file
}

fn refused(file: &tempfile::NamedTempFile) -> String {
    match inspect_dataset(file.path()) {
        Err(EngineError::InvalidDataset(m)) => m,
        other => panic!("expected a refusal, got {other:?}"),
    }
}

#[test]
fn a_few_hundred_bytes_promising_a_million_samples_are_refused() {
    // The header promises 1,000,000 × 8 float32; the archive holds none of it.
    let set = npz(&[("x.npy".into(), npy_header(&[1_000_000, 8]))], false);
    assert!(std::fs::metadata(set.path()).unwrap().len() < 400);
    let why = refused(&set);
    assert!(
        why.contains("truncated: its header promises more data"),
        "{why}"
    );
}

#[test]
fn an_archive_inflating_past_the_ratio_limit_is_refused_from_its_directory() {
    // 128 MiB of zeros deflates to about 128 KiB: a ratio near 1000:1.
    let rows = (128usize << 20) / (4 * 256);
    let file = tempfile::NamedTempFile::new().unwrap();
    let mut zip = zip::ZipWriter::new(file.reopen().unwrap());
    zip.start_file("x.npy", SimpleFileOptions::default())
        .unwrap();
    zip.write_all(&npy_header(&[rows, 256])).unwrap();
    let zeros = vec![0u8; 1 << 20];
    for _ in 0..128 {
        zip.write_all(&zeros).unwrap();
    }
    zip.finish().unwrap();
    let why = match inspect_dataset(file.path()) {
        Err(EngineError::InvalidDataset(m)) => m,
        other => panic!("expected a refusal, got {other:?}"),
    };
    assert!(
        why.contains(&format!("compression ratio above {MAX_RATIO}:1")),
        "{why}"
    );
}

#[test]
fn more_members_than_a_set_may_hold_are_refused() {
    let members: Vec<_> = (0..=MAX_ARRAYS)
        .map(|i| (format!("a{i}.npy"), npy_header(&[0, 1])))
        .collect();
    let why = refused(&npz(&members, false));
    assert!(
        why.contains(&format!("at most {MAX_ARRAYS} arrays")),
        "{why}"
    );
}

#[test]
fn an_array_holding_more_than_its_header_promises_is_refused() {
    let mut bytes = npy_header(&[2, 2]);
    bytes.extend([0u8; 4 * 4 + 4]);
    let why = refused(&npz(&[("x.npy".into(), bytes)], true));
    assert!(
        why.contains("holds more data than the 16 bytes its header promises"),
        "{why}"
    );
}

#[test]
fn an_archive_whose_directory_understates_a_member_is_refused() {
    // Write an honest deflated archive, then make the central directory
    // and the local header claim a smaller uncompressed size: a reader
    // trusting the claim would stop early or overrun its buffer.
    let mut bytes = npy_header(&[64, 4]);
    bytes.extend(vec![0u8; 64 * 4 * 4]);
    let set = npz(&[("x.npy".into(), bytes.clone())], true);
    let mut raw = std::fs::read(set.path()).unwrap();
    let real = (bytes.len() as u32).to_le_bytes();
    let fake = 100u32.to_le_bytes();
    let mut patched = 0;
    for i in 0..raw.len() - 4 {
        if raw[i..i + 4] == real {
            raw[i..i + 4].copy_from_slice(&fake);
            patched += 1;
        }
    }
    assert_eq!(patched, 2, "the local header and the central directory");
    std::fs::write(set.path(), &raw).unwrap();
    assert!(
        inspect_dataset(set.path()).is_err(),
        "a lying size is never accepted"
    );
}
