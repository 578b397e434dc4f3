//! TOML file diagnostics shared by every file a user hands us in TOML:
//! bench files, dialect profiles (and fixture files as they come).
//!
//! Contract: an error is a [`ConfigError`] that names the file, the line
//! (where one can be found), the key as a dotted path, and what is
//! wrong in the user's words. [`Ctx::parse`] turns serde's complaints
//! (unknown or missing keys, wrong types) into such errors; format tags
//! are checked by [`check_format`] (family and major version).
//!
//! A file whose format tag names a newer minor version than this build
//! knows may carry optional keys this build does not know:
//! [`Ctx::parse_keys`] ignores those with a warning (a [`ConfigError`]
//! located like any error) when [`Keys`] says the file is newer, and
//! refuses them otherwise, so a typo in a current file is still an error.
//!
//! Values from the file are shown, not echoed whole: every quoted or
//! backticked span of a message longer than [`SHOWN_CHARS`] characters is
//! cut to its first characters and its length ([`clip_spans`]), so a
//! 100 KB value makes a one-line error.
//!
//! Lines come from the parser, never from searching the text: the file is
//! parsed with `toml_edit` (the parser under `toml`, which keeps spans),
//! the key's path is walked through the document, and the byte offset
//! where the key is written becomes a 1-based line. So inline tables,
//! dotted and quoted keys, sub-tables and comments that mention a key all
//! land on the line that really holds it. A key that is not in the file
//! (a missing one) gets the line of the deepest table its path reaches:
//! that table's header, or the key that opened an inline or dotted table;
//! a missing top-level key has no line, since the top level has no header.

use std::fmt;
use std::ops::Range;

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

/// Characters of a value a message shows before it is cut.
pub const SHOWN_CHARS: usize = 40;

/// `text` with every span between backticks or double quotes (backslash
/// escapes honoured, as serde writes strings) cut to its first
/// [`SHOWN_CHARS`] characters, an ellipsis and its length in characters:
/// `"xxxx…" (100000 characters)`. A key or value that is not quoted
/// (a whole message) is cut the same way with [`clip`].
pub fn clip_spans(text: &str) -> String {
    let mut out = String::with_capacity(text.len().min(1024));
    let mut rest = text;
    while let Some(open) = rest.find(['`', '"']) {
        let quote = rest.as_bytes()[open] as char;
        out.push_str(&rest[..=open]);
        let body = &rest[open + 1..];
        let mut end = None;
        let mut escaped = false;
        for (i, c) in body.char_indices() {
            match c {
                '\\' if quote == '"' && !escaped => escaped = true,
                c if c == quote && !escaped => {
                    end = Some(i);
                    break;
                }
                _ => escaped = false,
            }
        }
        let Some(end) = end else {
            // No closing quote: the rest is the value.
            out.push_str(&clip(body));
            return out;
        };
        let inner = &body[..end];
        match cut(inner, SHOWN_CHARS) {
            Some((head, n)) => {
                out.push_str(head);
                out.push('…');
                out.push(quote);
                out.push_str(&format!(" ({n} characters)"));
            }
            None => {
                out.push_str(inner);
                out.push(quote);
            }
        }
        rest = &body[end + 1..];
    }
    out.push_str(rest);
    out
}

/// Characters of a key (a dotted path) shown before it is cut: keys are
/// longer than values as a rule (`faults.address_nack_probability`).
const KEY_CHARS: usize = 80;

/// `text` cut to its first [`SHOWN_CHARS`] characters, an ellipsis and
/// its length, when longer.
pub fn clip(text: &str) -> String {
    clip_to(text, SHOWN_CHARS)
}

fn clip_to(text: &str, chars: usize) -> String {
    match cut(text, chars) {
        Some((head, n)) => format!("{head}… ({n} characters)"),
        None => text.to_string(),
    }
}

/// The head to show of a text longer than `chars` characters, with its
/// length; None when it is short enough to show whole.
fn cut(text: &str, chars: usize) -> Option<(&str, usize)> {
    let (i, _) = text.char_indices().nth(chars)?;
    Some((&text[..i], text.chars().count()))
}

/// How [`Ctx::parse_keys`] meets keys this build does not know.
#[derive(Debug, Default)]
pub struct Keys {
    /// The file's format version when it is a newer minor than this
    /// build's: its unknown keys are ignored. None: they are refused.
    pub newer: Option<String>,
    /// One per key ignored, located like an error.
    pub ignored: Vec<ConfigError>,
}

/// Most unknown keys one file may have ignored: each costs a parse of
/// its table, so a file of nothing but unknown keys is refused instead.
pub const MAX_IGNORED_KEYS: usize = 64;

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
        text.parse().map_err(|e: toml::de::Error| ConfigError {
            file: self.file.to_string(),
            line: e.span().map(|s| line_at(text, s.start)),
            key: String::new(),
            message: clip_spans(e.message()),
        })
    }

    /// An error about `key` inside the n-th `[[device]]` block (or from the
    /// top level when `device` is None); `key` is a dotted path relative to
    /// that block, as the user is told it (`faults.seed`, `register[2].at`).
    pub fn err(&self, device: Option<usize>, key: &str, message: impl Into<String>) -> ConfigError {
        match device {
            Some(n) => self.err_at(&format!("device[{n}].{key}"), key, message),
            None => self.err_at(key, key, message),
        }
    }

    /// An error about `key` (as the user is told it) found at `path`, the
    /// key's full dotted path from the top of the file; for a key that is
    /// named relative to the table it sits in.
    pub fn err_at(&self, path: &str, key: &str, message: impl Into<String>) -> ConfigError {
        ConfigError {
            file: self.file.to_string(),
            line: line_of(self.text, &steps(path)),
            key: clip_to(key, KEY_CHARS),
            message: clip_spans(&message.into()),
        }
    }

    /// [`Ctx::parse`], meeting unknown keys as `keys` says: refused, or,
    /// in a file of a newer minor version, removed from `table` and noted
    /// in `keys.ignored` (at most [`MAX_IGNORED_KEYS`]).
    pub fn parse_keys<T: DeserializeOwned>(
        &self,
        device: Option<usize>,
        prefix: &str,
        table: toml::Table,
        keys: &mut Keys,
    ) -> Result<T, ConfigError> {
        let mut value = toml::Value::Table(table);
        loop {
            let e = match serde_path_to_error::deserialize(value.clone()) {
                Ok(t) => return Ok(t),
                Err(e) => e,
            };
            let unknown = e.inner().to_string().starts_with("unknown field");
            let name = e.inner().to_string().split('`').nth(1).map(str::to_string);
            let segments: Vec<serde_path_to_error::Segment> = e.path().iter().cloned().collect();
            let err = self.located(device, prefix, e);
            let (Some(version), true, Some(name)) = (&keys.newer, unknown, name) else {
                return Err(err);
            };
            if keys.ignored.len() >= MAX_IGNORED_KEYS || !remove_key(&mut value, &segments, &name) {
                return Err(err);
            }
            keys.ignored.push(ConfigError {
                message: format!("not a key this build knows (the file is format version {version}, newer); ignored"),
                ..err
            });
        }
    }

    pub fn parse<T: DeserializeOwned>(
        &self,
        device: Option<usize>,
        prefix: &str,
        table: toml::Table,
    ) -> Result<T, ConfigError> {
        serde_path_to_error::deserialize(toml::Value::Table(table)).map_err(|e| self.located(device, prefix, e))
    }

    /// A deserialisation error as a located [`ConfigError`].
    fn located(
        &self,
        device: Option<usize>,
        prefix: &str,
        e: serde_path_to_error::Error<toml::de::Error>,
    ) -> ConfigError {
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
        self.err(device, &key, in_file_terms(&msg))
    }
}

/// A serde message said in the terms of the file: serde names the Rust
/// type it wanted (`expected usize`); a bench or profile author wants the
/// kind of value (`expected a whole number, 0 or more`).
fn in_file_terms(msg: &str) -> String {
    const WANTED: [(&str, &str); 12] = [
        ("usize", "a whole number, 0 or more"),
        ("u64", "a whole number, 0 or more"),
        ("u32", "a whole number from 0 to 4294967295"),
        ("u16", "a whole number from 0 to 65535"),
        ("u8", "a whole number from 0 to 255"),
        ("i64", "a whole number"),
        ("i32", "a whole number"),
        ("i16", "a whole number from -32768 to 32767"),
        ("i8", "a whole number from -128 to 127"),
        ("f64", "a number"),
        ("f32", "a number"),
        ("a boolean", "true or false"),
    ];
    let Some((head, wanted)) = msg.rsplit_once(", expected ") else { return msg.to_string() };
    let wanted = WANTED.iter().find(|(rust, _)| *rust == wanted).map_or(wanted, |(_, said)| said);
    // `invalid type: string "big"` / `invalid value: integer `-5``: the
    // value as the file has it.
    let got = head
        .strip_prefix("invalid type: ")
        .or_else(|| head.strip_prefix("invalid value: "))
        .map(|v| v.replacen("integer ", "", 1).replacen("floating point ", "", 1).replacen("string ", "", 1));
    match got {
        Some(v) => format!("expected {wanted}, got {v}"),
        None => format!("{head}, expected {wanted}"),
    }
}

/// Removes key `name` at `path` (or the key `path` ends in, when it is
/// `name`) from `root`; whether there was one to remove.
fn remove_key(root: &mut toml::Value, path: &[serde_path_to_error::Segment], name: &str) -> bool {
    use serde_path_to_error::Segment;
    fn walk<'v>(mut v: &'v mut toml::Value, path: &[Segment]) -> Option<&'v mut toml::Value> {
        for seg in path {
            v = match seg {
                Segment::Map { key } => v.get_mut(key.as_str())?,
                Segment::Seq { index } => v.get_mut(*index)?,
                _ => return None,
            };
        }
        Some(v)
    }
    if let Some(t) = walk(root, path).and_then(toml::Value::as_table_mut)
        && t.remove(name).is_some()
    {
        return true;
    }
    match path.split_last() {
        Some((Segment::Map { key }, parent)) if key == name => {
            walk(root, parent).and_then(toml::Value::as_table_mut).is_some_and(|t| t.remove(name).is_some())
        }
        _ => false,
    }
}

/// Checks a `family/major[.minor]` format tag against `expected`
/// (`family/N`, minor 0): the family and the major version must match,
/// and a minor version must be a number. A newer minor version only adds
/// optional keys; it comes back as `Some(version)`, for [`Keys::newer`].
pub fn check_format(found: &str, expected: &str) -> Result<Option<String>, String> {
    let (family, major) = expected.split_once('/').unwrap_or((expected, ""));
    let Some(ver) = found.strip_prefix(family).and_then(|r| r.strip_prefix('/')) else {
        return Err(format!("expected \"{expected}\", found \"{found}\""));
    };
    let (found_major, minor) = ver.split_once('.').unwrap_or((ver, "0"));
    if found_major != major {
        return Err(format!(
            "{family} format version \"{ver}\" is not supported; this buscue reads major version {major}"
        ));
    }
    match minor.parse::<u32>() {
        Ok(0) => Ok(None),
        Ok(_) => Ok(Some(ver.to_string())),
        Err(_) => {
            Err(format!("format version \"{ver}\": the minor version must be a number, as in \"{family}/{major}.1\""))
        }
    }
}

/// One step of a key path: a key of a table, or an index into an array
/// (of values or of tables).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Step<'a> {
    Key(&'a str),
    Index(usize),
}

/// The steps of a dotted path as errors spell it: `serial.baud`,
/// `register[0].at`, `replies.ignore[1]`. A part whose brackets do not
/// hold an index is taken as one key, whole.
fn steps(path: &str) -> Vec<Step<'_>> {
    let mut out = Vec::new();
    for part in path.split('.').filter(|p| !p.is_empty()) {
        let (name, mut rest) = part.split_at(part.find('[').unwrap_or(part.len()));
        let mut indices = Vec::new();
        while let Some((i, r)) = rest.strip_prefix('[').and_then(|r| r.split_once(']')) {
            let Ok(i) = i.parse() else { break };
            indices.push(Step::Index(i));
            rest = r;
        }
        if !rest.is_empty() {
            out.push(Step::Key(part));
            continue;
        }
        if !name.is_empty() {
            out.push(Step::Key(name));
        }
        out.extend(indices);
    }
    out
}

/// The 1-based line of what `path` names in `text`: the line its key is
/// written on (an array element's own line). When the path leads out of
/// the document (a missing key), the line of the deepest table it did
/// reach: that table's header, or the key that opened an inline or dotted
/// table; None when that is the top level, which has no header.
fn line_of(text: &str, path: &[Step]) -> Option<usize> {
    // Errors are made after `Ctx::table` parsed the same text, so this
    // parse succeeds; it is repeated here, not kept, because only the
    // error path needs spans and a loader stops at its first error.
    let doc = toml_edit::ImDocument::parse(text).ok()?;
    let mut item = doc.as_item();
    let mut exact: Option<Range<usize>> = None;
    let mut table: Option<Range<usize>> = None;
    for step in path {
        let found = match *step {
            // A key's own span is where the user wrote it: on its `key =`
            // line, or in the `[header]` that opened a table.
            Step::Key(k) => item.as_table_like().and_then(|t| t.get_key_value(k)).map(|(key, next)| (next, key.span())),
            // An element of an array of tables spans from its `[[header]]`.
            Step::Index(i) => item.get(i).map(|next| (next, None)),
        };
        let Some((next, key_span)) = found else {
            return table.map(|s| line_at(text, s.start));
        };
        item = next;
        exact = key_span.or_else(|| item.span()).or(exact);
        // An array is no table to fall back to: a missing element falls
        // back past it, to the table that holds the array.
        if item.is_table_like() {
            table = exact.clone();
        }
    }
    exact.map(|s| line_at(text, s.start))
}

/// The 1-based line holding byte `offset` of `text`.
fn line_at(text: &str, offset: usize) -> usize {
    let end = offset.min(text.len());
    text.as_bytes()[..end].iter().filter(|&&b| b == b'\n').count() + 1
}

#[cfg(test)]
mod tests {
    use super::*;

    // Each test's TOML is one string, line by line; the expected line is
    // counted by hand and written beside the text. The old text search's
    // answer is noted where it differed.

    fn line(text: &str, device: Option<usize>, key: &str) -> Option<usize> {
        Ctx { file: "t.toml", text }.err(device, key, "wrong").line
    }

    #[test]
    fn a_key_in_an_inline_table_of_an_array() {
        let text = concat!(
            "format = \"buscue-bench/1\"\n", // 1
            "name = \"t\"\n",                // 2
            "\n",                            // 3
            "[[device]]\n",                  // 4
            "name = \"vent\"\n",             // 5
            "register = [\n",                // 6
            "  { at = 0, reset = 1 },\n",    // 7
            "  { at = 300 },\n",             // 8
            "]\n",                           // 9
        );
        // The text search took the first `at =` of the block: 7.
        assert_eq!(line(text, Some(0), "register[1].at"), Some(8));
        assert_eq!(line(text, Some(0), "register[0].reset"), Some(7));
    }

    #[test]
    fn a_key_mentioned_earlier_in_a_comment() {
        let text = concat!(
            "format = \"buscue-bench/1\"\n",                     // 1
            "name = \"t\"\n",                                    // 2
            "\n",                                                // 3
            "[[device]]\n",                                      // 4
            "name = \"log\"\n",                                  // 5
            "page_size = 16\n",                                  // 6
            "\n",                                                // 7
            "[[device]]\n",                                      // 8
            "name = \"cfg\"\n",                                  // 9
            "# page_size = 24 is refused: not a power of two\n", // 10
            "page_size = 24\n",                                  // 11
        );
        // The text search stopped at the comment: 10.
        assert_eq!(line(text, Some(1), "page_size"), Some(11));
        assert_eq!(line(text, Some(0), "page_size"), Some(6));
    }

    #[test]
    fn a_key_in_another_block_spelt_differently() {
        let text = concat!(
            "format = \"buscue-bench/1\"\n", // 1
            "name = \"t\"\n",                // 2
            "\n",                            // 3
            "[[device]]\n",                  // 4
            "name = \"log\"\n",              // 5
            "page_size = 16\n",              // 6
            "\n",                            // 7
            "[[ device ]]\n",                // 8
            "name = \"cfg\"\n",              // 9
            "\"page_size\" = 24\n",          // 10
        );
        // The text search knew neither the spaced header nor the quoted
        // key: it found no second device and gave no line.
        assert_eq!(line(text, Some(1), "page_size"), Some(10));
    }

    #[test]
    fn the_same_key_name_in_another_table() {
        let text = concat!(
            "format = \"buscue-dialect/1\"\n", // 1
            "name = \"p\"\n",                  // 2
            "\n",                              // 3
            "[capabilities]\n",                // 4
            "min_speed = \"10k\"\n",           // 5
            "max_speed = \"1M\"\n",            // 6
            "\n",                              // 7
            "[commands]\n",                    // 8
            "start = \"OPEN\"\n",              // 9
            "speed = \"CLOCK\"\n",             // 10
        );
        // The text search matched `speed =` inside `min_speed =`: 5.
        assert_eq!(line(text, None, "commands.speed"), Some(10));
        assert_eq!(line(text, None, "capabilities.max_speed"), Some(6));
    }

    #[test]
    fn a_dotted_key() {
        let text = concat!(
            "format = \"buscue-bench/1\"\n", // 1
            "name = \"t\"\n",                // 2
            "\n",                            // 3
            "[[device]]\n",                  // 4
            "name = \"air\"\n",              // 5
            "temperature_c.seed = 2\n",      // 6
            "faults.seed = 3\n",             // 7
        );
        // The text search took the first `seed =`: 6.
        assert_eq!(line(text, Some(0), "faults.seed"), Some(7));
        assert_eq!(line(text, Some(0), "temperature_c.seed"), Some(6));
    }

    #[test]
    fn a_key_in_a_sub_table_of_the_second_device() {
        let text = concat!(
            "format = \"buscue-bench/1\"\n", // 1
            "name = \"t\"\n",                // 2
            "\n",                            // 3
            "[[device]]\n",                  // 4
            "name = \"log\"\n",              // 5
            "[device.faults]\n",             // 6
            "seed = 1\n",                    // 7
            "\n",                            // 8
            "[[device]]\n",                  // 9
            "name = \"air\"\n",              // 10
            "model = \"climate-sensor\"\n",  // 11
            "[device.temperature_c]\n",      // 12
            "seed = 2\n",                    // 13
            "[device.faults]\n",             // 14
            "seed = 3\n",                    // 15
        );
        // The text search took the block's first `seed =`: 13.
        assert_eq!(line(text, Some(1), "faults.seed"), Some(15));
        assert_eq!(line(text, Some(0), "faults.seed"), Some(7));
    }

    #[test]
    fn long_quoted_spans_are_cut_with_their_length() {
        let long = "é".repeat(50);
        let cut = format!("{}…", "é".repeat(40));
        assert_eq!(clip_spans("must be \"big\", got \"x\""), "must be \"big\", got \"x\"");
        assert_eq!(clip_spans(&format!("got `{long}` here")), format!("got `{cut}` (50 characters) here"));
        // serde escapes quotes inside a string; the span ends at the real one.
        let escaped = format!("string \"{}\\\"{}\", expected u8", "a".repeat(30), "b".repeat(30));
        let shown = clip_spans(&escaped);
        assert!(shown.ends_with("…\" (62 characters), expected u8"), "{shown}");
        // No closing quote: the rest is the value.
        assert_eq!(clip_spans(&format!("found \"{long}")), format!("found \"{cut} (50 characters)"));
        assert_eq!(clip(&"k".repeat(41)), format!("{}… (41 characters)", "k".repeat(40)));
        // Keys are cut later than values.
        let key = "faults.address_nack_probability_and_then_some_more_text";
        assert_eq!(Ctx { file: "t", text: "" }.err(None, key, "m").key, key);
    }

    #[test]
    fn format_tags_and_minor_versions() {
        assert_eq!(check_format("buscue-bench/1", "buscue-bench/1"), Ok(None));
        assert_eq!(check_format("buscue-bench/1.0", "buscue-bench/1"), Ok(None));
        assert_eq!(check_format("buscue-bench/1.3", "buscue-bench/1"), Ok(Some("1.3".into())));
        assert!(check_format("buscue-bench/2.0", "buscue-bench/1").unwrap_err().contains("major version 1"));
        assert!(check_format("buscue-bench/1.x", "buscue-bench/1").is_err());
        assert!(check_format("other/1", "buscue-bench/1").is_err());
    }

    #[test]
    fn a_syntax_error_names_its_line() {
        let text = concat!(
            "format = \"buscue-bench/1\"\n", // 1
            "name = \"t\"\n",                // 2
            "= 3\n",                         // 3
        );
        let e = Ctx { file: "t.toml", text }.table().unwrap_err();
        // The offset of the error is the line's first byte, which the old
        // conversion (lines before the offset) counted as line 2.
        assert_eq!(e.line, Some(3), "{e}");
        assert_eq!(e.key, "");
    }

    #[test]
    fn serde_types_are_said_as_kinds_of_value() {
        assert_eq!(
            in_file_terms("invalid value: integer `-5`, expected usize"),
            "expected a whole number, 0 or more, got `-5`"
        );
        assert_eq!(
            in_file_terms("invalid type: string \"big\", expected u8"),
            "expected a whole number from 0 to 255, got \"big\""
        );
        assert_eq!(in_file_terms("invalid type: integer `1`, expected a boolean"), "expected true or false, got `1`");
        assert_eq!(in_file_terms("missing field `name`"), "missing field `name`");
    }

    #[derive(Debug, serde::Deserialize)]
    #[serde(deny_unknown_fields)]
    #[allow(dead_code)] // only the error matters
    struct Serial {
        baud: u32,
        #[serde(default)]
        parity: String,
    }

    #[derive(Debug, serde::Deserialize)]
    #[allow(dead_code)]
    struct Profile {
        name: String,
        serial: Serial,
    }

    #[test]
    fn a_missing_key_falls_back_to_its_tables_header() {
        let text = concat!(
            "name = \"p\"\n",       // 1
            "\n",                   // 2
            "# baud = 9600 once\n", // 3
            "[serial]\n",           // 4
            "parity = \"none\"\n",  // 5
        );
        let cx = Ctx { file: "p.toml", text };
        let e = cx.parse::<Profile>(None, "", cx.table().unwrap()).unwrap_err();
        assert_eq!(e.key, "serial.baud", "{e}");
        // The text search stopped at the comment: 3.
        assert_eq!(e.line, Some(4), "{e}");
        assert!(e.message.starts_with("missing field `baud`"), "{e}");
    }

    #[test]
    fn a_missing_key_of_a_device_gets_its_header_and_of_the_top_level_none() {
        let text = concat!(
            "format = \"buscue-bench/1\"\n", // 1
            "\n",                            // 2
            "[[device]]\n",                  // 3
            "name = \"log\"\n",              // 4
            "\n",                            // 5
            "[[device]]\n",                  // 6
            "name = \"air\"\n",              // 7
            "[device.faults]\n",             // 8
            "seed = 3\n",                    // 9
        );
        assert_eq!(line(text, Some(1), "address"), Some(6));
        assert_eq!(line(text, Some(1), "faults.address_nack_probability"), Some(8));
        assert_eq!(line(text, None, "name"), None);
        // A device that is not there has no block: no line, not the first
        // `[[device]]` header.
        assert_eq!(line(text, Some(2), "address"), None);
    }

    #[test]
    fn keys_of_an_inline_table_unknown_and_missing() {
        let text = concat!(
            "name = \"p\"\n",                                  // 1
            "# bauds = 1 is the slip this file makes below\n", // 2
            "serial = { parity = \"odd\", bauds = 1 }\n",      // 3
        );
        let cx = Ctx { file: "p.toml", text };
        let e = cx.parse::<Profile>(None, "", cx.table().unwrap()).unwrap_err();
        assert_eq!(e.key, "serial.bauds", "{e}");
        // The text search stopped at the comment: 2.
        assert_eq!(e.line, Some(3), "{e}");
        let text = concat!(
            "name = \"p\"\n",                  // 1
            "\n",                              // 2
            "serial = { parity = \"odd\" }\n", // 3
        );
        let cx = Ctx { file: "p.toml", text };
        let e = cx.parse::<Profile>(None, "", cx.table().unwrap()).unwrap_err();
        assert_eq!(e.key, "serial.baud", "{e}");
        // Missing from an inline table: the line of the key that opened it
        // (the text search gave none).
        assert_eq!(e.line, Some(3), "{e}");
    }
}
