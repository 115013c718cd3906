//! The `midge` binary: parses the command line (`cli`), runs it through the
//! midge-convert and midge-bench libraries, prints one line on error and exits.

mod bench;
mod cli;

use clap::error::ErrorKind;
use clap::Parser;
use cli::{Cli, EXIT_BAD_INPUT};

fn main() {
    let parsed = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) if matches!(e.kind(), ErrorKind::DisplayHelp | ErrorKind::DisplayVersion) => {
            let _ = e.print();
            std::process::exit(0);
        }
        Err(e) if e.kind() == ErrorKind::DisplayHelpOnMissingArgumentOrSubcommand => {
            eprintln!("midge: a command is needed (see midge --help)");
            std::process::exit(EXIT_BAD_INPUT);
        }
        Err(e) => {
            // One line: clap's first paragraph, without its "error: " prefix.
            let text = e.render().to_string();
            let first: Vec<&str> = text
                .lines()
                .map(str::trim)
                .take_while(|l| !l.is_empty())
                .collect();
            let first = first.join(" ");
            eprintln!(
                "midge: {} (see midge --help)",
                midge_convert::error::escape(first.trim_start_matches("error: "))
            );
            std::process::exit(EXIT_BAD_INPUT);
        }
    };
    match cli::run(parsed) {
        Ok(code) => std::process::exit(code),
        Err(e) => {
            eprintln!("midge: {e}");
            std::process::exit(EXIT_BAD_INPUT);
        }
    }
}
