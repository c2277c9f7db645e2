//! Quick sweep for development: `cargo run --release -p host-check --example agree_quick -- N`.
fn main() {
    let n: usize = std::env::args().nth(1).and_then(|a| a.parse().ok()).unwrap_or(2000);
    let r = host_check::agree::run(n, 7, &|d, t| eprintln!("{d}/{t}"));
    println!("{}", serde_json::to_string_pretty(&r).unwrap_or_default());
}
