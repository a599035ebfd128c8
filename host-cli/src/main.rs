//! The `hone` command.

fn main() {
    println!("hone {}", env!("CARGO_PKG_VERSION"));
}
