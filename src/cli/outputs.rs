//! What a finished evaluation leaves behind in CI: the ranked table on
//! stdout, and on request the JSON report, JUnit XML, a Markdown summary
//! and a CSV of the candidates.

use std::path::{Path, PathBuf};

use serde_json::Value;

use super::exit::Exit;
use super::{junit, render};
use crate::report::Report;
use crate::report::csv::candidates_csv;

#[derive(Debug, Clone, Default, clap::Args)]
pub struct OutputArgs {
    /// Write the full report as JSON here.
    #[arg(long, value_name = "PATH")]
    pub json: Option<PathBuf>,
    /// Write the gates as JUnit XML here (one testsuite per candidate).
    #[arg(long, value_name = "PATH")]
    pub junit: Option<PathBuf>,
    /// Write a Markdown summary here (for CI job pages).
    #[arg(long, value_name = "PATH")]
    pub summary: Option<PathBuf>,
    /// Write the ranked candidates as CSV here.
    #[arg(long, value_name = "PATH")]
    pub csv: Option<PathBuf>,
}

/// Prints the table and writes the requested files; `base` is the service's
/// address, for links.
pub fn publish(args: &OutputArgs, report: &Report, raw: &str, base: &str) -> Result<(), Exit> {
    print!("{}", render::table(report));
    let write = |path: &Path, text: String| {
        std::fs::write(path, text)
            .map_err(|e| Exit::input(format!("cannot write {}: {e}", path.display())))
    };
    if let Some(p) = &args.json {
        let pretty = serde_json::from_str::<Value>(raw)
            .and_then(|v| serde_json::to_string_pretty(&v))
            .unwrap_or_else(|_| raw.to_string());
        write(p, pretty)?;
    }
    if let Some(p) = &args.junit {
        write(p, junit::junit(report))?;
    }
    if let Some(p) = &args.summary {
        let page = format!("{base}/evaluations/{}", report.evaluation);
        let json = format!("{base}/v1/evaluations/{}/report", report.evaluation);
        write(p, render::markdown(report, Some(&page), Some(&json)))?;
    }
    if let Some(p) = &args.csv {
        write(p, candidates_csv(report))?;
    }
    Ok(())
}
