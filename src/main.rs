//! The `runprint` binary: all work happens in the library.

// Parsing large manifests and lockfiles makes many small allocations; mimalloc serves them
// markedly faster than the system allocator (see docs/performance.md).
#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;

fn main() -> std::process::ExitCode {
    runprint::cli::main()
}
