//! Our JSON report (format `buscue-report`, version 1.1): one object with
//! `format`, `version`, `passed` and `fixtures`, an array of
//! [`RunReport`](super::RunReport)s. Documented in `docs/reports.md`.

use serde::Serialize;

use super::RunReport;

pub const FORMAT: &str = "buscue-report";
pub const VERSION: &str = "1.1";

#[derive(Serialize)]
struct Document<'a> {
    format: &'static str,
    version: &'static str,
    passed: bool,
    fixtures: &'a [RunReport],
}

pub fn render(runs: &[RunReport]) -> std::io::Result<Vec<u8>> {
    let doc = Document { format: FORMAT, version: VERSION, passed: runs.iter().all(|r| r.passed), fixtures: runs };
    let mut v = serde_json::to_vec_pretty(&doc).map_err(std::io::Error::other)?;
    v.push(b'\n');
    Ok(v)
}
