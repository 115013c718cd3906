//! The `midge` binary: parses the command line, runs it through the
//! library (`midge_convert::cli`), prints one line on error and exits.

use clap::Parser;
use midge_convert::cli::{self, Cli, EXIT_BAD_INPUT};

fn main() {
    let parsed = Cli::parse();
    match cli::run(parsed) {
        Ok(code) => std::process::exit(code),
        Err(e) => {
            eprintln!("midge: {e}");
            std::process::exit(EXIT_BAD_INPUT);
        }
    }
}
