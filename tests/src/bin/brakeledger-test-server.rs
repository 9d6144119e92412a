//! The real `brakeledger` command line, built inside the tests package so that end-to-end tests
//! can start the server as a separate process (and kill it).

fn main() -> std::process::ExitCode {
    brakeledger::process::main()
}
