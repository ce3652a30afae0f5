fn main() {
    println!("hardmax {}", env!("CARGO_PKG_VERSION"));
}
