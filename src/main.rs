//! The `signfold` binary: the command line in `cli/` over the library.
#![allow(clippy::needless_range_loop)]

mod cli;

fn main() -> std::process::ExitCode {
    cli::main()
}
