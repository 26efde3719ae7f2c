//! The `tragus` binary: parse the command line, run, map errors to exit codes.
fn main() {
    std::process::exit(tragus::cli::main_with_args(std::env::args_os()));
}
