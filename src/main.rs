//! The `runprint` binary: all work happens in the library.

use std::io::Write;

// Parsing large manifests and lockfiles makes many small allocations; mimalloc serves them
// markedly faster than the system allocator (see docs/performance.md).
#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;

fn main() {
    let code = runprint::cli::main();
    // Every file is written (and synced) and every child process waited for by now. The
    // process ends without handing its memory back piece by piece: the allocator's exit
    // handler returns each freed 64 KiB page to the kernel with its own system call (about a
    // hundred and fifty after a stamp, a millisecond and more), while the kernel reclaims
    // everything at once anyway. Only what the standard library buffers needs flushing.
    let _ = std::io::stdout().flush();
    let _ = std::io::stderr().flush();
    // SAFETY: `_exit` ends the process; no destructor or exit handler is needed past this
    // point (see above), and no other thread holds work that must finish.
    unsafe { libc::_exit(i32::from(code)) }
}
