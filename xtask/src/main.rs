//! Project automation. `cargo xtask test` is the project's test command.

fn main() {
    eprintln!("usage: cargo xtask test");
    std::process::exit(2);
}
