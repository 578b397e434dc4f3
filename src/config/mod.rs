//! TOML file diagnostics shared by every file a user hands us in TOML:
//! bench files, dialect profiles (and fixture files as they come).
//!
//! Contract: an error is a [`ConfigError`] that names the file, the line
//! where the line can be found, the key as a dotted path, and what is
//! wrong in the user's words. [`Ctx::parse`] turns serde's complaints
//! (unknown or missing keys, wrong types) into such errors; format tags
//! are checked by [`check_format`] (family and major version).

use std::fmt;

use serde::de::DeserializeOwned;

/// A problem in a TOML file, located: file, line (when known), key
/// (dotted path, empty for the file as a whole) and what is wrong.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ConfigError {
    pub file: String,
    pub line: Option<usize>,
    pub key: String,
    pub message: String,
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file)?;
        if let Some(l) = self.line {
            write!(f, ":{l}")?;
        }
        if self.key.is_empty() {
            write!(f, ": {}", self.message)
        } else {
            write!(f, ": key `{}`: {}", self.key, self.message)
        }
    }
}

impl std::error::Error for ConfigError {}

/// Finds the line of `key` inside the n-th `[[device]]` block (or the top
/// level when `device` is None); falls back to the block's header line.
pub fn locate(text: &str, device: Option<usize>, key: &str) -> Option<usize> {
    let leaf = key.rsplit(['.', '[']).next().unwrap_or(key).trim_end_matches(']');
    let leaf =
        if leaf.chars().all(|c| c.is_ascii_digit()) { key.split(['.', '[']).next().unwrap_or(key) } else { leaf };
    let mut block: Option<usize> = None;
    let mut seen = 0usize;
    let mut header = None;
    for (i, raw) in text.lines().enumerate() {
        let line = raw.trim_start();
        if line.starts_with("[[device]]") {
            block = Some(seen);
            seen += 1;
            if Some(block.unwrap()) == device {
                header = Some(i + 1);
            }
            continue;
        }
        if line.starts_with('[') && !line.starts_with("[[device.") && !line.starts_with("[device.") {
            block = None;
            continue;
        }
        if block == device {
            let rest = line.strip_prefix(leaf).map(str::trim_start);
            if rest.is_some_and(|r| r.starts_with('='))
                || line.contains(&format!("{leaf} ="))
                || line.contains(&format!("{leaf}="))
            {
                return Some(i + 1);
            }
        }
    }
    header
}

/// Error context for one TOML file: every error it makes names the file
/// and finds the line of the key it is about.
pub struct Ctx<'a> {
    pub file: &'a str,
    pub text: &'a str,
}

impl Ctx<'_> {
    /// The file as a TOML table; a syntax error names its line.
    pub fn table(&self) -> Result<toml::Table, ConfigError> {
        let text = self.text;
        text.parse().map_err(|e: toml::de::Error| {
            let line = e.span().map(|s| text[..s.start.min(text.len())].lines().count().max(1));
            ConfigError { file: self.file.to_string(), line, key: String::new(), message: e.message().to_string() }
        })
    }

    pub fn err(&self, device: Option<usize>, key: &str, message: impl Into<String>) -> ConfigError {
        ConfigError {
            file: self.file.to_string(),
            line: locate(self.text, device, key),
            key: key.to_string(),
            message: message.into(),
        }
    }

    pub fn parse<T: DeserializeOwned>(
        &self,
        device: Option<usize>,
        prefix: &str,
        table: toml::Table,
    ) -> Result<T, ConfigError> {
        serde_path_to_error::deserialize(toml::Value::Table(table)).map_err(|e| {
            let path = e.path().to_string();
            let path_named_table = path != "." && !path.is_empty();
            let key = if path == "." {
                prefix.to_string()
            } else if prefix.is_empty() {
                path
            } else {
                format!("{prefix}.{path}")
            };
            let msg = e.into_inner().to_string();
            // Nested tables add "in `table`" lines after the message proper.
            let msg = msg.trim().lines().rfind(|l| !l.starts_with("in `")).unwrap_or_default().to_string();
            // A missing or unknown field names itself in the message.
            let named = msg.split('`').nth(1).map(str::to_string);
            let key = match (&named, key.is_empty() || key == ".") {
                (Some(n), true) => n.clone(),
                (Some(n), false) if msg.starts_with("unknown field") || msg.starts_with("missing field") => {
                    if key.ends_with(n.as_str()) {
                        key
                    } else if prefix.is_empty() && !path_named_table {
                        n.clone()
                    } else {
                        format!("{key}.{n}")
                    }
                }
                _ => key,
            };
            self.err(device, &key, msg)
        })
    }
}

/// Checks a `family/major[.minor]` format tag against `expected`
/// (`family/N`): the family and the major version must match; a newer
/// minor version only adds optional keys.
pub fn check_format(found: &str, expected: &str) -> Result<(), String> {
    let (family, major) = expected.split_once('/').unwrap_or((expected, ""));
    let Some(ver) = found.strip_prefix(family).and_then(|r| r.strip_prefix('/')) else {
        return Err(format!("expected \"{expected}\", found \"{found}\""));
    };
    if ver.split('.').next().unwrap_or_default() != major {
        return Err(format!("{family} format version {ver} is not supported; this buscue reads major version {major}"));
    }
    Ok(())
}
