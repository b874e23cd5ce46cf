//! Records the tract version from Cargo.lock so that every report names the
//! engine that produced it.

fn main() {
    println!("cargo:rerun-if-changed=Cargo.lock");
    let lock = std::fs::read_to_string("Cargo.lock").unwrap_or_default();
    let version = lock
        .split("[[package]]")
        .find(|block| block.contains("name = \"tract-core\""))
        .and_then(|block| block.lines().find_map(|l| l.strip_prefix("version = ")))
        .map(|v| v.trim_matches('"').to_string())
        .unwrap_or_else(|| "unknown".into());
    println!("cargo:rustc-env=PROCTOR_TRACT_VERSION={version}");
}
