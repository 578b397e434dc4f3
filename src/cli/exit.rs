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
/// The trace could not be written (full disk, folder removed, no
/// permission): the run has no complete record, so it failed, whatever
/// the board did. Its own code, so a station can tell a full disk from a
/// bad board.
pub const RECORD_FAILED: u8 = 6;
/// `shrink`: the recording replays without a divergence, so there is
/// nothing to shrink (the board on the desk behaves as the customer's did).
pub const NOT_DIVERGING: u8 = 8;
/// `station`: at least one fixture did not pass (a failed or errored
/// step, a measurement out of limits, a fixture that could not run).
pub const STATION_FAILED: u8 = 7;
/// Interrupted (Ctrl-C): 128 + SIGINT, as shells report it.
pub const INTERRUPTED: u8 = 130;

use crate::adapter::{AdapterError, OpenError};
use crate::player::RunError;
use crate::script::Abort;

/// The exit code of a bus session that stopped with `e`, whichever
/// command ran it (`run`, `scan`, `replay`): the one mapping.
pub fn of_run_error(e: &RunError) -> u8 {
    match e {
        RunError::Bus { .. }
        | RunError::PollTimeout { .. }
        | RunError::WaitTimeout { .. }
        | RunError::Protocol { .. } => BUS_FAILURE,
        RunError::Adapter(e) => of_adapter_error(e),
        RunError::Interrupted => INTERRUPTED,
        RunError::Record(_) => RECORD_FAILED,
        RunError::Shape(_) | RunError::TimeLimit { .. } => INPUT,
    }
}

/// Input is the request's fault (usage); every other adapter error is the
/// adapter's or the link's.
pub fn of_adapter_error(e: &AdapterError) -> u8 {
    match e {
        AdapterError::Input(_) => INPUT,
        _ => ADAPTER,
    }
}

/// The exit code of a script run that stopped early.
pub fn of_abort(a: &Abort) -> u8 {
    match a {
        Abort::Check { .. } => CHECK_FAILED,
        Abort::Run { error, .. } => of_run_error(error),
        Abort::Script { .. } | Abort::Limit(_) => INPUT,
    }
}

/// The exit code of an error that ended a command before it could report
/// one itself: an adapter that cannot be reached is the adapter/link code,
/// a session error keeps its own, anything else is usage or input.
pub fn of_error(e: &anyhow::Error) -> u8 {
    if let Some(o) = e.downcast_ref::<OpenError>() {
        return match o {
            OpenError::Input(_) => INPUT,
            OpenError::Link(_) => ADAPTER,
        };
    }
    if let Some(a) = e.downcast_ref::<AdapterError>() {
        return of_adapter_error(a);
    }
    if let Some(r) = e.downcast_ref::<RunError>() {
        return of_run_error(r);
    }
    INPUT
}
