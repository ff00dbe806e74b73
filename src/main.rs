//! The `kinequil` binary: everything lives in the library; this maps outcomes to exit codes.

fn main() -> std::process::ExitCode {
    kinequil::cli::main()
}
