fn main() -> std::process::ExitCode {
    cleave::cli::main()
}
