//! The `samewise` binary: parse the command line, run, print errors, return the exit code.
//! Everything lives in the library; see `samewise::cli`.

fn main() -> std::process::ExitCode {
    let args = samewise::cli::Args::parse_from_env();
    match samewise::cli::run(args) {
        Ok(code) => code,
        Err(err) => samewise::cli::report_error(&err),
    }
}
