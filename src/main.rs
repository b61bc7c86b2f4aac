//! The `horosphere` binary: parse the command line, run one library stage,
//! set the exit status. All work lives in the library (`src/lib.rs`).

use std::process::ExitCode;

mod cli;

fn main() -> ExitCode {
    cli::main()
}
