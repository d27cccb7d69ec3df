//! The `latchtime` binary: all work is in the library; see `cli`.

fn main() -> std::process::ExitCode {
    latchtime::cli::run()
}
