//! The `hexvigil` binary: parse arguments, run, map failure to an exit code.

use std::process::ExitCode;

use clap::Parser;

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
