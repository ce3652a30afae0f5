//! The hardmax binary: all work happens in the library; see `hardmax::cli`.

fn main() -> std::process::ExitCode {
    match hardmax::cli::main_entry() {
        Ok(()) => std::process::ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            std::process::ExitCode::FAILURE
        }
    }
}
