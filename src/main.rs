//! The `cleave` command: all of it lives in [`cleave::cli`].

fn main() -> std::process::ExitCode {
    cleave::cli::main()
}
