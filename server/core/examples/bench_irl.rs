//! Prints the `irl` benchmark's rows (`goalsmith_core::bench::run("irl")`), one JSON object per
//! line, for `tests/reference/bench_irl_compare.py`.
//!
//! Run: `cargo run -p goalsmith-core --release --example bench_irl`.

fn main() {
    match goalsmith_core::bench::run("irl") {
        Ok(rows) => rows.iter().for_each(|r| println!("{}", r.to_json())),
        Err(e) => {
            eprintln!("bench_irl: {e}");
            std::process::exit(1);
        }
    }
}
