//! The `terrastack` command: parse arguments, call the library, map errors to exit codes.

mod cli;

fn main() {
    let code = match cli::run() {
        Ok(()) => 0,
        Err(e) => {
            eprintln!("error: {e}");
            e.exit_code()
        }
    };
    std::process::exit(code);
}
