//! Caps on the texts a script hands to the tool.
//!
//! The memory limit counts Lua's allocator only, so a script could make
//! the Rust side copy, format and write text of any size (a 100 MiB log
//! line is a 100 MiB trace line). Every text a script controls is bounded
//! here before the tool copies more than the cap of it.
//!
//! Contract:
//! - A text over its cap keeps its first bytes, at most the cap and never
//!   half a UTF-8 character, and ends with [`marker`]
//!   (`… [cut: 104857600 bytes in all]`), so a cut text of valid UTF-8 is
//!   at most [`MARKER_MAX`] bytes over its cap. A text within its cap is
//!   the text as before, byte for byte.
//! - Nothing is cut silently: each cut is noted with its script line in
//!   the Lua state's [`Cuts`], and the run ends with one warning naming
//!   the first cut and counting the others ([`Cuts::warning`]).
//! - The caps (the README's "Sandbox and limits" gives the reasons):
//!   [`TEXT_CAP`] for log lines, check messages and error texts,
//!   [`NAME_CAP`] for step names. Byte lists for the bus are bounded
//!   elsewhere, by the operation limit (`convert::bytes`).

use mlua::{FromLua, Lua, Value};

use crate::record::Origin;

/// Log lines (`log`, `print`, `warn`), check messages and error texts:
/// room for a hex dump of a whole 16 KiB EEPROM (three characters a
/// byte), far more than a person reads in one line, and small enough that
/// a script writing one a millisecond cannot outrun a disk.
pub const TEXT_CAP: usize = 64 * 1024;

/// Step names: a title in a report, one per step; 1 KiB holds any title.
pub const NAME_CAP: usize = 1024;

/// The longest [`marker`]: for a text of `usize::MAX` bytes.
pub const MARKER_MAX: usize = "… [cut:  bytes in all]".len() + 20;

/// What ends a cut text: how long the whole text was.
pub fn marker(total: usize) -> String {
    format!("… [cut: {total} bytes in all]")
}

/// Builds one text from parts, copying at most `cap` bytes of them and
/// counting all. The cap counts the script's bytes; invalid UTF-8 among
/// them shows as U+FFFD, as `String::from_utf8_lossy` writes it.
pub struct Text {
    cap: usize,
    kept: String,
    /// Bytes of the parts copied into `kept`.
    taken: usize,
    /// Whether a part was cut: nothing after it is kept.
    full: bool,
    total: usize,
}

impl Text {
    pub fn new(cap: usize) -> Self {
        Text { cap, kept: String::new(), taken: 0, full: false, total: 0 }
    }

    pub fn push(&mut self, bytes: &[u8]) {
        self.total = self.total.saturating_add(bytes.len());
        if self.full {
            return;
        }
        let room = self.cap - self.taken;
        let part = if bytes.len() > room {
            self.full = true;
            whole_chars(&bytes[..room])
        } else {
            bytes
        };
        self.taken += part.len();
        self.kept.push_str(&String::from_utf8_lossy(part));
    }

    /// Bytes pushed in all.
    pub fn total(&self) -> usize {
        self.total
    }

    /// The text, with the marker when it was cut.
    pub fn finish(self) -> String {
        let mut s = self.kept;
        if self.total > self.cap {
            s.push_str(&marker(self.total));
        }
        s
    }

    /// [`Self::finish`], noting a cut of `what` at `origin` first.
    pub fn finish_noted(self, lua: &Lua, what: &'static str, origin: Option<Origin>) -> String {
        if self.total > self.cap {
            note(lua, Cut { what, origin, total: self.total, cap: self.cap });
        }
        self.finish()
    }
}

/// `bytes` without a UTF-8 sequence cut short at its end.
fn whole_chars(bytes: &[u8]) -> &[u8] {
    // The last lead byte is at most three bytes from the end.
    let from = bytes.len().saturating_sub(4);
    let Some(i) = (from..bytes.len()).rev().find(|&i| bytes[i] & 0xC0 != 0x80) else { return bytes };
    let need = match bytes[i] {
        0xC0..=0xDF => 2,
        0xE0..=0xEF => 3,
        0xF0..=0xF7 => 4,
        _ => 1,
    };
    if bytes.len() - i < need { &bytes[..i] } else { bytes }
}

/// One cut text.
#[derive(Debug, Clone)]
struct Cut {
    what: &'static str,
    origin: Option<Origin>,
    total: usize,
    cap: usize,
}

/// The cuts of one run, kept as the Lua state's app data.
#[derive(Debug, Default)]
pub struct Cuts {
    first: Option<Cut>,
    count: u64,
}

impl Cuts {
    /// The one warning a run ends with, if anything was cut.
    pub fn warning(&self) -> Option<String> {
        let c = self.first.as_ref()?;
        let at = c.origin.as_ref().map(|o| format!("{o}: ")).unwrap_or_default();
        let more = match self.count - 1 {
            0 => String::new(),
            1 => "; 1 more text was cut".into(),
            n => format!("; {n} more texts were cut"),
        };
        Some(format!(
            "{at}the {} was cut to its first {} of {} bytes (see \"Sandbox and limits\" in the README){more}",
            c.what, c.cap, c.total
        ))
    }
}

fn note(lua: &Lua, cut: Cut) {
    // try_: a cut noted while the cuts are borrowed is lost, never a panic
    // (nothing here re-enters).
    if let Ok(Some(mut cuts)) = lua.try_app_data_mut::<Cuts>() {
        cuts.count += 1;
        cuts.first.get_or_insert(cut);
    }
}

/// A script's string argument capped at `cap` bytes as `what`; any other
/// value converts exactly as to a `String` (numbers become text, the rest
/// are refused with mlua's own message).
fn capped_arg(value: Value, lua: &Lua, cap: usize, what: &'static str) -> mlua::Result<String> {
    match &value {
        Value::String(s) if s.as_bytes().len() > cap => {
            let mut t = Text::new(cap);
            t.push(&s.as_bytes());
            Ok(t.finish_noted(lua, what, super::origin(lua)))
        }
        _ => String::from_lua(value, lua),
    }
}

/// A step name argument, capped at [`NAME_CAP`].
pub struct StepName(pub String);

impl FromLua for StepName {
    fn from_lua(value: Value, lua: &Lua) -> mlua::Result<Self> {
        capped_arg(value, lua, NAME_CAP, "step name").map(StepName)
    }
}

/// A check message argument, capped at [`TEXT_CAP`] where it is used: a
/// string over the cap stays the script's until its kept part is copied;
/// anything else converts exactly as to a `String`.
pub enum Message {
    Long(mlua::String),
    Short(String),
}

impl FromLua for Message {
    fn from_lua(value: Value, lua: &Lua) -> mlua::Result<Self> {
        match value {
            Value::String(s) if s.as_bytes().len() > TEXT_CAP => Ok(Message::Long(s)),
            other => String::from_lua(other, lua).map(Message::Short),
        }
    }
}

impl Message {
    /// Appends the message to a text being built.
    pub fn push_to(&self, t: &mut Text) {
        match self {
            Message::Long(s) => t.push(&s.as_bytes()),
            Message::Short(s) => t.push(s.as_bytes()),
        }
    }

    /// The message alone, cut (and noted) if it is over the cap.
    pub fn into_text(self, lua: &Lua) -> String {
        match self {
            Message::Short(s) => s,
            long => {
                let mut t = Text::new(TEXT_CAP);
                long.push_to(&mut t);
                t.finish_noted(lua, "check message", super::origin(lua))
            }
        }
    }
}

/// The error value a script raised, with a string over [`TEXT_CAP`] cut
/// (noted at `origin`, where it was raised) before the tool copies it.
pub fn error_value(lua: &Lua, err: Value, origin: Option<Origin>) -> Value {
    let Value::String(s) = &err else { return err };
    if s.as_bytes().len() <= TEXT_CAP {
        return err;
    }
    let mut t = Text::new(TEXT_CAP);
    t.push(&s.as_bytes());
    let text = t.finish_noted(lua, "error text", origin);
    lua.create_string(text).map(Value::String).unwrap_or(err)
}

/// A message the tool built (an error or check text that may hold what a
/// script passed) bounded at [`TEXT_CAP`]; one already cut at its source
/// (at most [`MARKER_MAX`] over) is kept as it is.
pub fn bounded(lua: &Lua, message: String, origin: Option<Origin>) -> String {
    if message.len() <= TEXT_CAP + MARKER_MAX {
        return message;
    }
    let mut t = Text::new(TEXT_CAP);
    t.push(message.as_bytes());
    t.finish_noted(lua, "error text", origin)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_text_is_kept_as_it_is() {
        let mut t = Text::new(8);
        t.push(b"abc");
        t.push(b" ");
        t.push(b"\xFFd");
        assert_eq!(t.total(), 6);
        assert_eq!(t.finish(), "abc \u{FFFD}d");
    }

    #[test]
    fn long_text_keeps_its_start_and_says_how_long_it_was() {
        let mut t = Text::new(4);
        t.push(b"abcdef");
        t.push(b"gh");
        assert_eq!(t.total(), 8);
        assert_eq!(t.finish(), "abcd… [cut: 8 bytes in all]");
    }

    #[test]
    fn a_cut_never_splits_a_character() {
        let mut t = Text::new(4);
        t.push("abcé".as_bytes()); // 5 bytes: é is two
        assert_eq!(t.finish(), "abc… [cut: 5 bytes in all]");
        let mut t = Text::new(2);
        t.push(b"\xFF\xFF\xFF");
        assert_eq!(t.finish(), "\u{FFFD}\u{FFFD}… [cut: 3 bytes in all]");
    }

    #[test]
    fn the_longest_marker_fits_its_allowance() {
        assert_eq!(marker(usize::MAX).len(), MARKER_MAX);
    }
}
