//! The `brakeledger` binary: hands over to [`brakeledger::process::main`].

fn main() -> std::process::ExitCode {
    brakeledger::process::main()
}
