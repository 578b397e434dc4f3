//! Files a command writes because the user named them (`run --trace`,
//! `replay --trace-out`, `to-script -o`): never one of the command's own
//! inputs, and never a file that exists unless `--force` says so.
//!
//! Contract: [`check`] refuses an output that is the same file as an
//! input (by file identity where the system has one, and by canonical
//! path, so a second name or a link to the input is caught too);
//! [`create`] opens the output with create-new semantics unless forced,
//! so a file that appears between the check and the write is not
//! truncated either. Default trace paths are always new and need neither.
//! An output named `-` is refused: on a command line `-` stands for
//! standard input or output, never for a file of that name (`./-` is one).

use std::fs::File;
use std::io;
use std::path::{Path, PathBuf};

use thiserror::Error;

#[derive(Debug, Error)]
pub enum OutputError {
    #[error("refusing to write {what} over {} (it is {role} of this command)", .path.display())]
    IsInput { what: &'static str, path: PathBuf, role: &'static str },
    #[error("`-` is not a file name for {what}: {what} goes to a file (write ./- for a file named -)")]
    Dash { what: &'static str },
    #[error("{} exists; add --force to replace it", .0.display())]
    Exists(PathBuf),
    #[error("cannot write {}: {detail}", .path.display())]
    Io { path: PathBuf, detail: io::Error },
}

/// Whether `a` and `b` name the same existing file.
fn same_file(a: &Path, b: &Path) -> bool {
    let (Ok(ma), Ok(mb)) = (std::fs::metadata(a), std::fs::metadata(b)) else { return false };
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        if (ma.dev(), ma.ino()) == (mb.dev(), mb.ino()) {
            return true;
        }
    }
    let _ = (ma, mb);
    matches!((a.canonicalize(), b.canonicalize()), (Ok(x), Ok(y)) if x == y)
}

/// Refuses `out` when it is one of `inputs` (each with the role it plays,
/// "the script", "the trace"); `what` names what would be written.
pub fn check(out: &Path, what: &'static str, inputs: &[(&Path, &'static str)]) -> Result<(), OutputError> {
    if out.as_os_str() == "-" {
        return Err(OutputError::Dash { what });
    }
    for (input, role) in inputs {
        if same_file(out, input) {
            return Err(OutputError::IsInput { what, path: out.to_path_buf(), role });
        }
    }
    Ok(())
}

/// Opens `out` for writing: a new file, or with `force` a replaced one.
pub fn create(out: &Path, force: bool) -> Result<File, OutputError> {
    let mut o = std::fs::OpenOptions::new();
    o.write(true);
    if force {
        o.create(true).truncate(true);
    } else {
        o.create_new(true);
    }
    o.open(out).map_err(|e| match e.kind() {
        io::ErrorKind::AlreadyExists => OutputError::Exists(out.to_path_buf()),
        _ => OutputError::Io { path: out.to_path_buf(), detail: e },
    })
}

/// The error for a trace writer that could not create `out`.
pub fn trace_error(out: &Path, e: io::Error) -> OutputError {
    match e.kind() {
        io::ErrorKind::AlreadyExists => OutputError::Exists(out.to_path_buf()),
        _ => OutputError::Io { path: out.to_path_buf(), detail: e },
    }
}
