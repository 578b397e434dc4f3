//! How records look to a person or a program: the plain frame log (with
//! colour on a terminal) and the JSON stream. Views are sinks: they observe
//! records and never talk to the adapter.

pub mod format;
pub mod json;
pub mod plain;

use std::io::IsTerminal;

/// When to colour output.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColourChoice {
    Auto,
    Always,
    Never,
}

impl ColourChoice {
    /// Whether to colour standard output: `auto` colours only a terminal
    /// and honours NO_COLOR (no-color.org: any non-empty value turns
    /// colour off).
    pub fn resolve(self) -> bool {
        self.resolve_for(std::io::stdout().is_terminal())
    }

    /// The same for standard error (messages, errors).
    pub fn resolve_stderr(self) -> bool {
        self.resolve_for(std::io::stderr().is_terminal())
    }

    /// The same for an output that is a terminal or not.
    pub fn resolve_for(self, terminal: bool) -> bool {
        match self {
            ColourChoice::Always => true,
            ColourChoice::Never => false,
            ColourChoice::Auto => std::env::var_os("NO_COLOR").is_none_or(|v| v.is_empty()) && terminal,
        }
    }
}
