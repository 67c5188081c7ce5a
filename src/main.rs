//! The `tracewalk` command: a thin layer over the library. Parses arguments, calls the library,
//! prints. Exit codes: 0 success, 1 findings (hunt) or flagged messages where asked, 2 usage or
//! input errors.

mod cli;

fn main() {
    std::process::exit(cli::run());
}
