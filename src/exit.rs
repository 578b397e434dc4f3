//! Exit codes, documented in the README. Stable: scripts and CI read them.

/// The run did what it was asked.
pub const OK: u8 = 0;
/// A script check failed.
pub const CHECK_FAILED: u8 = 1;
/// Usage or input error: bad command line, bench file, script (syntax,
/// runtime error, sandbox violation) or limit reached. Matches clap's own
/// code for usage errors.
pub const INPUT: u8 = 2;
/// The bus failed: NACK after all retries, ACK-poll timeout, arbitration
/// lost, bus error, clock-stretch timeout.
pub const BUS_FAILURE: u8 = 3;
/// The adapter or the link to it failed.
pub const ADAPTER: u8 = 4;
/// A replay or diff found differences from the recording.
pub const DIVERGED: u8 = 5;
/// Interrupted (Ctrl-C): 128 + SIGINT, as shells report it.
pub const INTERRUPTED: u8 = 130;
