//! The `slowfield` command: parses the command line and hands over to the library.

use std::process::ExitCode;

use clap::Parser;
use slowfield::cli::{run, Cli};

fn main() -> ExitCode {
    slowfield::pinn::keep_freed_memory();
    let cli = Cli::parse();
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(1)
        }
    }
}
