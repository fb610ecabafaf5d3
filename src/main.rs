//! The `hexvigil` binary: parse arguments, run, map failure to an exit code.

use std::process::ExitCode;

use clap::Parser;

/// mimalloc instead of the system allocator: the report and the ingest allocate and free many
/// small strings and week-sized buffers, which glibc's allocator handed back to the kernel and
/// faulted in again (BENCHMARKS.md, "Report").
#[global_allocator]
static ALLOC: mimalloc::MiMalloc = mimalloc::MiMalloc;

fn main() -> ExitCode {
    let cli = hexvigil::cli::Cli::parse();
    match hexvigil::cli::run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(f) => {
            eprintln!("hexvigil: error: {}", f.message);
            ExitCode::from(f.code)
        }
    }
}
