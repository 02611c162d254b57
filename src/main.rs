//! The `waymark` command: a thin layer over the library's `cli` module.

fn main() -> std::process::ExitCode {
    waymark::cli::main()
}
