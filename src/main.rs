//! The `cavern` command: maps the result of [`cavern::cli::main`] to an exit code
//! (0 success, 2 bad input, 1 runtime failure).

fn main() {
    std::process::exit(cavern::cli::main());
}
