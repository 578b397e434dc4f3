//! Guarded registers unlocked for a whole run (`--allow-guarded`), and
//! the log of every guarded write that went to the bus.
//!
//! Contract:
//! - A register marked `guard = true` in its map is written only when the
//!   call passes `{unlock = true}` or the run unlocks it here (by name, or
//!   `all`); otherwise the write is refused before the bus.
//! - Every guarded write that reached the bus, however it was unlocked,
//!   is logged in order ([`GuardedWrite`]) for the summary and the
//!   reports; a refused or failed write is not.

use std::collections::BTreeSet;

pub use crate::report::GuardedWrite;

/// Which guarded registers the run unlocks.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub enum AllowGuarded {
    /// None: each write says `{unlock = true}` itself.
    #[default]
    None,
    /// Every guarded register (`--allow-guarded all`).
    All,
    /// These registers, by their map names.
    Named(BTreeSet<String>),
}

impl AllowGuarded {
    /// `all`, or a comma-separated list of register names.
    pub fn parse(s: &str) -> Result<AllowGuarded, String> {
        if s.trim() == "all" {
            return Ok(AllowGuarded::All);
        }
        let mut names = BTreeSet::new();
        for n in s.split(',').map(str::trim) {
            if n.is_empty() || n.len() > 64 || !n.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
                return Err(format!(
                    "`{n}` is not a register name: write --allow-guarded NAME[,NAME...] or --allow-guarded all"
                ));
            }
            names.insert(n.to_string());
        }
        Ok(AllowGuarded::Named(names))
    }

    /// Adds what another `--allow-guarded` unlocks.
    pub fn merge(self, other: AllowGuarded) -> AllowGuarded {
        match (self, other) {
            (AllowGuarded::All, _) | (_, AllowGuarded::All) => AllowGuarded::All,
            (AllowGuarded::None, o) | (o, AllowGuarded::None) => o,
            (AllowGuarded::Named(mut a), AllowGuarded::Named(b)) => {
                a.extend(b);
                AllowGuarded::Named(a)
            }
        }
    }

    /// Whether the run unlocks the register named `register`.
    pub fn allows(&self, register: &str) -> bool {
        match self {
            AllowGuarded::None => false,
            AllowGuarded::All => true,
            AllowGuarded::Named(n) => n.contains(register),
        }
    }
}

/// The run's unlocks and what was written under them.
#[derive(Debug, Default)]
pub struct GuardLog {
    pub allow: AllowGuarded,
    pub writes: Vec<GuardedWrite>,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lists_and_all() {
        let a = AllowGuarded::parse("POWER, OTP_LOCK").unwrap();
        assert!(a.allows("POWER") && a.allows("OTP_LOCK") && !a.allows("CONTROL"));
        assert!(AllowGuarded::parse("all").unwrap().allows("ANY"));
        assert!(AllowGuarded::parse("A,,B").unwrap_err().contains("not a register name"));
        assert_eq!(a.clone().merge(AllowGuarded::All), AllowGuarded::All);
        assert!(a.merge(AllowGuarded::parse("X").unwrap()).allows("X"));
    }
}
