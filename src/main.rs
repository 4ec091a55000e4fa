fn main() -> std::process::ExitCode {
    emsplan::cli::main()
}
