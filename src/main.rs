//! The `voxstrata` binary: the command line of [`voxstrata::cli`].

use std::process::ExitCode;

fn main() -> ExitCode {
    ExitCode::from(voxstrata::cli::main_with_args(std::env::args_os()) as u8)
}
