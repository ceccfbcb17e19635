//! The `terrastack` command: parse arguments, call the library, map errors to exit codes.

mod cli;

fn main() {
    quiet_on_closed_pipe();
    let code = match cli::run() {
        Ok(()) => 0,
        Err(e) => {
            eprintln!("error: {e}");
            e.exit_code()
        }
    };
    std::process::exit(code);
}

/// A closed output pipe (`terrastack features | head -1`) ends the process quietly, as it
/// does other Unix tools: the default action of SIGPIPE, which the shell reports as status
/// 141 (128 + 13). Rust programs start with SIGPIPE ignored, so every later write to the
/// pipe (stdout, or stderr's progress lines) would fail and `println!` would panic.
/// Outputs are safe either way: they are renamed into place only when complete.
#[cfg(unix)]
fn quiet_on_closed_pipe() {
    // SIGPIPE is 13 and SIG_DFL is 0 on every Unix (POSIX; Linux, macOS and the BSDs agree).
    const SIGPIPE: i32 = 13;
    const SIG_DFL: usize = 0;
    extern "C" {
        fn signal(signum: i32, handler: usize) -> usize;
    }
    // SAFETY: restoring a signal's default disposition before any other thread exists.
    unsafe {
        signal(SIGPIPE, SIG_DFL);
    }
}

#[cfg(not(unix))]
fn quiet_on_closed_pipe() {}
