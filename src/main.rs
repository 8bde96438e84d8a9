//! The `runprint` binary: all work happens in the library.

fn main() -> std::process::ExitCode {
    runprint::cli::main()
}
