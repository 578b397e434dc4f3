//! The Value Change Dump reader (IEEE 1364-2005 clause 18): header
//! sections, `$timescale`, nested `$scope`s, scalar wires and 1-bit
//! vectors, `#time`, value changes with `x`/`z`, the `$dump*` blocks,
//! comments. Streams levels of the chosen SDA and SCL into a decoder.

use std::collections::HashSet;
use std::io::Read;

use super::{CaptureError, Level, Lines, Ticks};

/// A declared signal.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Signal {
    pub code: String,
    /// Hierarchical name, scopes joined by `.`.
    pub name: String,
    pub width: u32,
}

/// How SDA and SCL are picked: by hierarchical name, by the last part of
/// the name, or by identifier code; None: the unique signal named
/// sda / scl in any case.
#[derive(Debug, Clone, Default)]
pub struct Select {
    pub sda: Option<String>,
    pub scl: Option<String>,
}

/// The header of a VCD.
pub struct Header {
    pub ticks: Ticks,
    pub signals: Vec<Signal>,
}

fn tokens(l: &[u8]) -> impl Iterator<Item = &[u8]> {
    l.split(|b| b.is_ascii_whitespace()).filter(|t| !t.is_empty())
}

fn text(t: &[u8]) -> String {
    crate::ascii::escape_controls(&String::from_utf8_lossy(t)).into_owned()
}

/// Reads the header up to `$enddefinitions $end`.
pub fn header<R: Read>(lines: &mut Lines<R>) -> Result<Header, CaptureError> {
    let mut scopes: Vec<String> = Vec::new();
    let mut signals = Vec::new();
    let mut ticks = None;
    let mut section: Option<(String, Vec<String>)> = None;
    while let Some(l) = lines.next_line()? {
        let toks: Vec<String> = tokens(l).map(text).collect();
        for tok in toks {
            match &mut section {
                None => {
                    if tok.starts_with('#') {
                        return Err(lines.err(format!("time stamp `{tok}` before $enddefinitions $end")));
                    }
                    if !tok.starts_with('$') {
                        return Err(lines.err(format!("expected a $ section in the header, found `{tok}`")));
                    }
                    section = Some((tok, Vec::new()));
                }
                Some((_, words)) if tok != "$end" => words.push(tok),
                Some(_) => {
                    let Some((name, words)) = section.take() else { continue };
                    match name.as_str() {
                        "$timescale" => ticks = Some(timescale(&words.concat()).map_err(|m| lines.err(m))?),
                        "$scope" => scopes.push(words.get(1).cloned().unwrap_or_default()),
                        "$upscope" => {
                            scopes.pop();
                        }
                        "$var" => {
                            if words.len() < 4 {
                                return Err(lines.err("$var needs a type, a width, a code and a name"));
                            }
                            let width =
                                words[1].parse().map_err(|_| lines.err(format!("bad $var width `{}`", words[1])))?;
                            let mut name = scopes.clone();
                            name.push(words[3].clone());
                            signals.push(Signal { code: words[2].clone(), name: name.join("."), width });
                        }
                        "$enddefinitions" => {
                            let ticks = ticks.unwrap_or(Ticks { fs: 1_000_000 }); // 1 ns when none is given
                            return Ok(Header { ticks, signals });
                        }
                        _ => {} // $date, $version, $comment and unknown sections
                    }
                }
            }
        }
    }
    Err(lines.err("the file ends before $enddefinitions"))
}

/// `1ns`, `10 ps`, `100us` to femtoseconds per tick.
pub fn timescale(s: &str) -> Result<Ticks, String> {
    let digits = s.trim_end_matches(|c: char| c.is_ascii_alphabetic());
    let unit = &s[digits.len()..];
    let n: u64 = match digits.trim() {
        "1" => 1,
        "10" => 10,
        "100" => 100,
        _ => return Err(format!("bad $timescale `{s}` (1, 10 or 100 of s, ms, us, ns, ps, fs)")),
    };
    let fs: u64 = match unit {
        "s" => 1_000_000_000_000_000,
        "ms" => 1_000_000_000_000,
        "us" => 1_000_000_000,
        "ns" => 1_000_000,
        "ps" => 1_000,
        "fs" => 1,
        _ => return Err(format!("bad $timescale unit `{unit}`")),
    };
    Ok(Ticks { fs: n * fs })
}

/// The codes of SDA and SCL.
pub fn pick(h: &Header, sel: &Select, file: &str) -> Result<(String, String), CaptureError> {
    let find = |want: &Option<String>, default: &str| -> Result<String, CaptureError> {
        let hits: Vec<&Signal> = match want {
            Some(w) => {
                let by_name: Vec<&Signal> = h.signals.iter().filter(|s| &s.name == w).collect();
                if by_name.is_empty() {
                    h.signals.iter().filter(|s| &s.code == w || last(&s.name) == w).collect()
                } else {
                    by_name
                }
            }
            None => h.signals.iter().filter(|s| last(&s.name).eq_ignore_ascii_case(default)).collect(),
        };
        let what = want.clone().unwrap_or_else(|| default.to_string());
        let mut codes: Vec<&str> = hits.iter().map(|s| s.code.as_str()).collect();
        codes.dedup();
        match codes.as_slice() {
            [c] => {
                if hits[0].width != 1 {
                    return Err(CaptureError::File {
                        file: file.into(),
                        message: format!("signal `{what}` is {} bits wide, not 1", hits[0].width),
                    });
                }
                Ok(c.to_string())
            }
            [] => Err(CaptureError::File {
                file: file.into(),
                message: format!("no signal `{what}` (list them with --signals; pick with --sda/--scl)"),
            }),
            _ => Err(CaptureError::File {
                file: file.into(),
                message: format!("{} signals match `{what}`; name one with --sda/--scl", codes.len()),
            }),
        }
    };
    Ok((find(&sel.sda, "sda")?, find(&sel.scl, "scl")?))
}

fn last(name: &str) -> &str {
    name.rsplit('.').next().unwrap_or(name)
}

/// Streams the body: calls `levels(t, sda, scl)` whenever time moves on
/// after a change; returns the last time stamp.
pub fn body<R: Read>(
    lines: &mut Lines<R>,
    h: &Header,
    sda: &str,
    scl: &str,
    mut levels: impl FnMut(u64, Level, Level),
) -> Result<u64, CaptureError> {
    let known: HashSet<&[u8]> = h.signals.iter().map(|s| s.code.as_bytes()).collect();
    let (sda, scl) = (sda.as_bytes(), scl.as_bytes());
    let (mut s, mut c) = (Level::Unknown, Level::Unknown);
    let mut t: u64 = 0;
    let mut dirty = false;
    let mut in_comment = false;
    while let Some(r) = lines.next_range()? {
        let l = lines.slice(r);
        let mut it = l.split(|b| *b == b' ' || *b == b'\t').filter(|t| !t.is_empty());
        while let Some(tok) = it.next() {
            if in_comment {
                in_comment = tok != b"$end";
                continue;
            }
            let (value, code): (u8, &[u8]) = match tok[0] {
                b'#' => {
                    let n = parse_u64(&tok[1..]).ok_or_else(|| lines.err(format!("bad time `{}`", text(tok))))?;
                    if n < t {
                        return Err(lines.err(format!("time goes backwards: #{n} after #{t}")));
                    }
                    if dirty && n > t {
                        levels(t, s, c);
                        dirty = false;
                    }
                    t = n;
                    continue;
                }
                b'$' => {
                    match tok {
                        b"$comment" => in_comment = true,
                        b"$dumpoff" => {
                            // Every value is x while dumping is off (§18.2.3.4).
                            s = Level::Unknown;
                            c = Level::Unknown;
                            dirty = true;
                        }
                        _ => {} // $dumpvars, $dumpall, $dumpon (its values follow), $end
                    }
                    continue;
                }
                b'0' | b'1' | b'x' | b'X' | b'z' | b'Z' => (tok[0], &tok[1..]),
                b'b' | b'B' => {
                    let code = it.next().ok_or_else(|| lines.err("vector value without an identifier"))?;
                    let v = tok[1..].last().copied().unwrap_or(b'x');
                    (v, code)
                }
                b'r' | b'R' => {
                    let code = it.next().ok_or_else(|| lines.err("real value without an identifier"))?;
                    if code == sda || code == scl {
                        return Err(lines.err("SDA or SCL given as a real value"));
                    }
                    continue;
                }
                _ => return Err(lines.err(format!("not a value change: `{}`", text(tok)))),
            };
            let level = match value {
                b'0' => Level::Low,
                b'1' => Level::High,
                _ => Level::Unknown,
            };
            if code == sda {
                s = level;
            } else if code == scl {
                c = level;
            } else if !known.contains(code) {
                return Err(lines.err(format!("unknown identifier `{}`", text(code))));
            } else {
                continue;
            }
            dirty = true;
        }
    }
    if in_comment {
        return Err(lines.err("the file ends inside a $comment"));
    }
    if dirty {
        levels(t, s, c);
    }
    Ok(t)
}

/// Decimal digits to a number; None on anything else or overflow.
pub fn parse_u64(d: &[u8]) -> Option<u64> {
    if d.is_empty() {
        return None;
    }
    let mut n: u64 = 0;
    for &b in d {
        if !b.is_ascii_digit() {
            return None;
        }
        n = n.checked_mul(10)?.checked_add(u64::from(b - b'0'))?;
    }
    Some(n)
}
