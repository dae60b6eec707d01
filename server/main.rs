//! The `goalsmith` binary: see `goalsmith --help`.

use std::process::ExitCode;

fn main() -> ExitCode {
    goalsmith::cli::main()
}
