//! The `actswap` binary: parses the command line and hands over to the library.

fn main() -> std::process::ExitCode {
    actswap::cli::main()
}
