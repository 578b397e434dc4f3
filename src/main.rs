//! The `buscue` command: everything lives in [`buscue::cli`].

fn main() -> std::process::ExitCode {
    buscue::cli::main()
}
