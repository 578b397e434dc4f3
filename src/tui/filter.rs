//! Which records a filter or a search keeps. One language for the view's
//! prompt and `buscue view`'s options: space-separated terms, all of which
//! must hold.
//!
//! - `@0x48` or `@72`: frames to that 7-bit address (`@10:0x2A5` a 10-bit one)
//! - `ok`, `nack`, `error`, `retry`: frames by result
//! - `reg:NAME`: frames whose register/field names contain NAME (any case)
//! - `bytes:0A,??,3C`: frames that wrote or read those bytes in a row (`??` any byte)
//! - any other word: records whose text (register names, log line, step name) contains it

use thiserror::Error;

use crate::bus::{Address, Operation};
use crate::record::{Frame, Record};

#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Term {
    Address(Address),
    Result(ResultKind),
    Register(String),
    Bytes(Vec<Option<u8>>),
    Text(String),
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ResultKind {
    Ok,
    Nack,
    Error,
    Retry,
}

#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct Filter {
    pub terms: Vec<Term>,
    /// The text it was read from, shown in the status line.
    pub text: String,
}

#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum FilterError {
    #[error("`{0}` is not an address (write @0x48, @72 or @10:0x2A5)")]
    Address(String),
    #[error("`{0}` is not a byte pattern (write bytes:0A,??,3C: hex bytes, ?? for any)")]
    Bytes(String),
    #[error("`reg:` needs a name")]
    Register,
}

impl Filter {
    pub fn parse(text: &str) -> Result<Filter, FilterError> {
        let mut terms = Vec::new();
        for w in text.split_whitespace() {
            terms.push(Term::parse(w)?);
        }
        Ok(Filter { terms, text: text.trim().to_string() })
    }

    pub fn is_empty(&self) -> bool {
        self.terms.is_empty()
    }

    pub fn matches(&self, r: &Record) -> bool {
        self.terms.iter().all(|t| t.matches(r))
    }
}

impl Term {
    pub fn parse(w: &str) -> Result<Term, FilterError> {
        if let Some(a) = w.strip_prefix('@') {
            return parse_address(a).map(Term::Address).ok_or_else(|| FilterError::Address(w.to_string()));
        }
        if let Some(n) = w.strip_prefix("reg:") {
            if n.is_empty() {
                return Err(FilterError::Register);
            }
            return Ok(Term::Register(n.to_lowercase()));
        }
        if let Some(b) = w.strip_prefix("bytes:") {
            let pat: Option<Vec<Option<u8>>> =
                b.split(',').map(|x| if x == "??" { Some(None) } else { parse_byte(x).map(Some) }).collect();
            return match pat {
                Some(p) if !p.is_empty() => Ok(Term::Bytes(p)),
                _ => Err(FilterError::Bytes(w.to_string())),
            };
        }
        Ok(match w {
            "ok" => Term::Result(ResultKind::Ok),
            "nack" => Term::Result(ResultKind::Nack),
            "error" => Term::Result(ResultKind::Error),
            "retry" => Term::Result(ResultKind::Retry),
            _ => Term::Text(w.to_lowercase()),
        })
    }

    fn matches(&self, r: &Record) -> bool {
        match (self, r) {
            (Term::Text(t), Record::Log { text, .. }) => text.to_lowercase().contains(t),
            (Term::Text(t), Record::Step { name, .. }) => name.to_lowercase().contains(t),
            // A word finds register names and what the map read (`drdy`, `open`, `degc`).
            (Term::Text(t), Record::Frame(f)) => {
                f.decoded.as_ref().is_some_and(|d| d.to_lowercase().contains(t))
                    || f.values.iter().any(|v| v.name.to_lowercase().contains(t) || v.shown.to_lowercase().contains(t))
            }
            (_, Record::Frame(f)) => self.matches_frame(f),
            _ => false,
        }
    }

    fn matches_frame(&self, f: &Frame) -> bool {
        match self {
            Term::Address(a) => f.address == *a,
            Term::Result(k) => match k {
                ResultKind::Ok => f.outcome.fault.is_none(),
                ResultKind::Nack => f.outcome.fault.as_ref().is_some_and(|x| x.is_nack()),
                ResultKind::Error => f.outcome.fault.as_ref().is_some_and(|x| !x.is_nack()),
                ResultKind::Retry => f.attempt > 1,
            },
            Term::Register(n) => f.decoded.as_ref().is_some_and(|d| d.to_lowercase().contains(n)),
            Term::Bytes(p) => frame_byte_runs(f).any(|run| contains(run, p)),
            Term::Text(_) => false,
        }
    }
}

/// The byte runs of a frame: each write's bytes, each read's data.
fn frame_byte_runs(f: &Frame) -> impl Iterator<Item = &[u8]> {
    f.ops.iter().enumerate().map(move |(i, op)| match op {
        Operation::Write(b) => b.as_slice(),
        _ => f.outcome.ops.get(i).map_or(&[][..], |o| o.data.as_slice()),
    })
}

fn contains(run: &[u8], pat: &[Option<u8>]) -> bool {
    run.len() >= pat.len() && run.windows(pat.len()).any(|w| w.iter().zip(pat).all(|(b, p)| p.is_none_or(|p| p == *b)))
}

fn parse_byte(x: &str) -> Option<u8> {
    let x = x.strip_prefix("0x").or_else(|| x.strip_prefix("0X")).unwrap_or(x);
    if x.is_empty() || x.len() > 2 {
        return None;
    }
    u8::from_str_radix(x, 16).ok()
}

fn parse_number(x: &str) -> Option<u16> {
    match x.strip_prefix("0x").or_else(|| x.strip_prefix("0X")) {
        Some(h) => u16::from_str_radix(h, 16).ok(),
        None => x.parse().ok(),
    }
}

/// `0x48`, `72`, or `10:0x2A5`.
pub fn parse_address(a: &str) -> Option<Address> {
    match a.strip_prefix("10:") {
        Some(t) => parse_number(t).filter(|v| *v < 0x400).map(Address::Ten),
        None => parse_number(a).filter(|v| *v < 0x80).map(|v| Address::Seven(v as u8)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn terms_parse_and_bad_ones_say_why() {
        let f = Filter::parse("@0x48 nack bytes:0a,??,3C reg:Humid").unwrap();
        assert_eq!(
            f.terms,
            vec![
                Term::Address(Address::Seven(0x48)),
                Term::Result(ResultKind::Nack),
                Term::Bytes(vec![Some(0x0A), None, Some(0x3C)]),
                Term::Register("humid".into()),
            ]
        );
        assert_eq!(Filter::parse("@10:0x2A5").unwrap().terms, vec![Term::Address(Address::Ten(0x2A5))]);
        assert!(matches!(Filter::parse("@0x80"), Err(FilterError::Address(_))), "7-bit addresses end at 0x7F");
        assert!(matches!(Filter::parse("bytes:0a,zz"), Err(FilterError::Bytes(_))));
        assert!(matches!(Filter::parse("bytes:"), Err(FilterError::Bytes(_))));
    }

    #[test]
    fn a_byte_pattern_matches_a_run_with_wildcards() {
        assert!(contains(&[1, 0x0A, 9, 0x3C], &[Some(0x0A), None, Some(0x3C)]));
        assert!(!contains(&[0x0A, 0x3C], &[Some(0x0A), None, Some(0x3C)]));
        assert!(!contains(&[0x0A, 9, 0x3D], &[Some(0x0A), None, Some(0x3C)]));
    }

    #[test]
    fn a_word_finds_what_the_map_read() {
        use crate::bus::{Address, Operation, Outcome};
        use crate::record::FieldValue;
        let outcome = Outcome { ops: vec![], bus_time: Default::default(), measured: None, fault: None };
        let mut f = Frame::single(1, Default::default(), Address::Seven(0x2A), vec![Operation::Read(1)], outcome);
        f.decoded = Some("OUTPUT".into());
        f.values = vec![FieldValue { name: "VALVE1".into(), raw: 1, shown: "open".into() }];
        let r = Record::Frame(f);
        assert!(Filter::parse("Open").unwrap().matches(&r), "a decoded value, any case");
        assert!(Filter::parse("valve1").unwrap().matches(&r), "a field name");
        assert!(!Filter::parse("closed").unwrap().matches(&r));
    }
}
