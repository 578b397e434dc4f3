//! The TOML files a station run reads besides the script: a fixtures file
//! (`buscue station FIXTURES.toml SCRIPT`) and a parameters file
//! (`--params FILE.toml`, also for `run`).
//!
//! Contract:
//! - A fixtures file carries `format = "buscue-fixtures/1"` (a newer
//!   minor version's unknown keys are ignored with a warning, as in bench
//!   files) and one `[[fixture]]` per fixture: `name`, `adapter` (as
//!   `--adapter` takes it) and an optional `params` table.
//! - A parameters file is a table of `name = value`; values are strings,
//!   numbers, booleans or arrays of numbers (a byte list).
//! - Every value keeps where it came from (`FILE:LINE`), so a value the
//!   script's declaration refuses is reported at its line; every error in
//!   the files themselves names the file, the line and the key.

use std::collections::BTreeMap;
use std::path::Path;

use anyhow::{Context, Result};
use serde::Deserialize;

use crate::config::{ConfigError, Ctx, Keys, check_format};
use crate::script::params::Given;

use super::station::Fixture;

/// The format tag of fixtures files this build writes and reads.
pub const FORMAT: &str = "buscue-fixtures/1";

/// Most bytes of a fixtures or parameters file: far more than any station
/// needs, a bound on what a wrong file can make us hold.
const MAX_FILE: u64 = 4 << 20;

/// A fixture from a fixtures file, with its own parameters.
#[derive(Debug, Clone)]
pub struct FileFixture {
    pub fixture: Fixture,
    pub params: BTreeMap<String, Given>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawFile {
    #[allow(dead_code)]
    format: String,
    #[serde(default)]
    fixture: Vec<RawFixture>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawFixture {
    name: String,
    adapter: String,
    #[serde(default)]
    params: toml::Table,
}

fn read_text(path: &Path, what: &str) -> Result<String> {
    let meta = std::fs::metadata(path).with_context(|| format!("cannot read the {what} {}", path.display()))?;
    if !meta.is_file() {
        anyhow::bail!("the {what} {} is not a file", path.display());
    }
    if meta.len() > MAX_FILE {
        anyhow::bail!("the {what} {} is larger than {} bytes", path.display(), MAX_FILE);
    }
    std::fs::read_to_string(path).with_context(|| format!("cannot read the {what} {}", path.display()))
}

/// Reads a fixtures file; warnings (keys of a newer minor version,
/// ignored) come back beside the fixtures.
pub fn read_fixtures(path: &Path) -> Result<(Vec<FileFixture>, Vec<ConfigError>)> {
    let text = read_text(path, "fixtures file")?;
    let file = path.display().to_string();
    Ok(parse_fixtures(&file, &text)?)
}

fn parse_fixtures(file: &str, text: &str) -> Result<(Vec<FileFixture>, Vec<ConfigError>), ConfigError> {
    let cx = Ctx { file, text };
    let table = cx.table()?;
    let mut keys = Keys::default();
    match table.get("format") {
        Some(toml::Value::String(f)) => keys.newer = check_format(f, FORMAT).map_err(|m| cx.err(None, "format", m))?,
        Some(_) => return Err(cx.err(None, "format", format!("expected a string such as \"{FORMAT}\""))),
        None => {
            return Err(cx.err(None, "format", format!("missing: a fixtures file starts with format = \"{FORMAT}\"")));
        }
    }
    let raw: RawFile = cx.parse_keys(None, "", table, &mut keys)?;
    if raw.fixture.is_empty() {
        return Err(cx.err(None, "fixture", "no [[fixture]] in the file: a station needs at least one"));
    }
    let mut out: Vec<FileFixture> = Vec::new();
    for (i, f) in raw.fixture.into_iter().enumerate() {
        let at = |key: &str, m: String| cx.err_at(&format!("fixture[{i}].{key}"), &format!("fixture[{i}].{key}"), m);
        let fixture = super::station::fixture_of(&f.name, &f.adapter).map_err(|m| {
            if m.starts_with('`') && m.contains("fixture name") { at("name", m) } else { at("adapter", m) }
        })?;
        if out.iter().any(|o| o.fixture.name == fixture.name) {
            return Err(at("name", format!("fixture `{}` is named twice; every fixture needs its own name", f.name)));
        }
        let params = params_of(&cx, &format!("fixture[{i}].params"), &f.params)?;
        out.push(FileFixture { fixture, params });
    }
    Ok((out, keys.ignored))
}

/// Reads a parameters file (`--params`).
pub fn read_params(path: &Path) -> Result<BTreeMap<String, Given>> {
    let text = read_text(path, "parameters file")?;
    let file = path.display().to_string();
    let cx = Ctx { file: &file, text: &text };
    let table = cx.table()?;
    Ok(params_of(&cx, "", &table)?)
}

/// The values of a TOML table of parameters at `prefix` (a dotted path,
/// empty for the top level), each with its `FILE:LINE`.
fn params_of(cx: &Ctx, prefix: &str, table: &toml::Table) -> Result<BTreeMap<String, Given>, ConfigError> {
    let mut out = BTreeMap::new();
    for (name, v) in table {
        let path = if prefix.is_empty() { name.clone() } else { format!("{prefix}.{name}") };
        let err = |m: &str| cx.err_at(&path, &path, m);
        if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
            return Err(err("not a parameter name: letters, digits and '_'"));
        }
        let value = value_text(v).ok_or_else(|| {
            err("a parameter is a string, a number, true or false, or an array of numbers (a byte list)")
        })?;
        let line = cx.err_at(&path, &path, "").line;
        let source = match line {
            Some(l) => format!("{}:{l}", cx.file),
            None => cx.file.to_string(),
        };
        out.insert(name.clone(), Given { value, source });
    }
    Ok(out)
}

/// A TOML value as the text a parameter's type converts. Whole numbers
/// go as `0x` hex, so a `hex` parameter written `0x00A1` in the file
/// means 0xA1, not 0x161, and every other type reads them as numbers.
fn value_text(v: &toml::Value) -> Option<String> {
    fn whole(i: i64) -> String {
        if i < 0 { format!("-0x{:X}", i.unsigned_abs()) } else { format!("0x{i:X}") }
    }
    Some(match v {
        toml::Value::String(s) => s.clone(),
        toml::Value::Integer(i) => whole(*i),
        toml::Value::Float(f) => f.to_string(),
        toml::Value::Boolean(b) => b.to_string(),
        toml::Value::Array(a) => {
            let parts: Option<Vec<String>> =
                a.iter().map(|x| x.as_integer().filter(|i| (0..=255).contains(i)).map(whole)).collect();
            parts?.join(",")
        }
        _ => return None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fixtures_with_params_and_lines() {
        let text = "format = \"buscue-fixtures/1\"\n\n[[fixture]]\nname = \"bay1\"\nadapter = \"sim\"\nparams = { serial = 0x00A1, key = [1, 2] }\n";
        let (f, warn) = parse_fixtures("f.toml", text).unwrap();
        assert!(warn.is_empty());
        assert_eq!(f[0].fixture.name, "bay1");
        assert_eq!(f[0].params["serial"], Given { value: "0xA1".into(), source: "f.toml:6".into() });
        assert_eq!(f[0].params["key"].value, "0x1,0x2");
    }

    #[test]
    fn bad_files_name_file_line_and_key() {
        let bad_adapter = "format = \"buscue-fixtures/1\"\n[[fixture]]\nname = \"a\"\nadapter = \"teleport:x\"\n";
        let e = parse_fixtures("f.toml", bad_adapter).unwrap_err();
        assert_eq!((e.line, e.key.as_str()), (Some(4), "fixture[0].adapter"), "{e}");
        let unknown = "format = \"buscue-fixtures/1\"\n[[fixture]]\nname = \"a\"\nadapter = \"sim\"\ncolour = 1\n";
        let e = parse_fixtures("f.toml", unknown).unwrap_err();
        assert_eq!(e.line, Some(5), "{e}");
        assert!(e.key.contains("colour"), "{e}");
        let e = parse_fixtures("f.toml", "[[fixture]]\nname = \"a\"\nadapter = \"sim\"\n").unwrap_err();
        assert_eq!(e.key, "format");
        let e = parse_fixtures("f.toml", "format = \"buscue-fixtures/2\"\n").unwrap_err();
        assert!(e.message.contains("major version 1"), "{e}");
        let twice = "format = \"buscue-fixtures/1\"\n[[fixture]]\nname = \"a\"\nadapter = \"sim\"\n[[fixture]]\nname = \"a\"\nadapter = \"sim\"\n";
        let e = parse_fixtures("f.toml", twice).unwrap_err();
        assert_eq!((e.line, e.key.as_str()), (Some(6), "fixture[1].name"), "{e}");
        let table = "format = \"buscue-fixtures/1\"\n[[fixture]]\nname = \"a\"\nadapter = \"sim\"\nparams = { x = { y = 1 } }\n";
        let e = parse_fixtures("f.toml", table).unwrap_err();
        assert_eq!((e.line, e.key.as_str()), (Some(5), "fixture[0].params.x"), "{e}");
    }

    #[test]
    fn a_newer_minor_version_ignores_unknown_keys_with_a_warning() {
        let text = "format = \"buscue-fixtures/1.2\"\n[[fixture]]\nname = \"a\"\nadapter = \"sim\"\nrack = 3\n";
        let (f, warn) = parse_fixtures("f.toml", text).unwrap();
        assert_eq!(f.len(), 1);
        assert_eq!(warn.len(), 1);
        assert_eq!(warn[0].line, Some(5));
    }
}
