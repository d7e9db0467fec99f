//! One PIDE price (or a serial run over the invented American book of
//! `benches/pide.rs`) for instruction counts under callgrind, which are
//! independent of the load on the shared machine:
//!
//!     cargo build --profile fast --example pide_profile
//!     valgrind --tool=callgrind ./target/fast/examples/pide_profile nojump
//!     valgrind --tool=callgrind ./target/fast/examples/pide_profile dhfv
//!     valgrind --tool=callgrind ./target/fast/examples/pide_profile book 200
//!
//! The book rows are the same as the benchmark's (copied here: examples
//! cannot import a bench).

use saltus::engines::pide::{self, Exercise, PideConfig};
use saltus::model::{Contract, JumpParams, OptionKind};

/// Rows of the invented American book (a fixed low-discrepancy sweep, so
/// the subset is the same on every run).
fn book(rows: usize) -> Vec<Contract> {
    (0..rows)
        .map(|i| {
            let u = |k: f64| (i as f64 * k).fract();
            let jumps = if i % 2 == 0 {
                JumpParams {
                    rate: 0.05 + 1.0 * u(0.618_034),
                    mean: -0.4 + 0.5 * u(0.414_214),
                    vol: 0.05 + 0.4 * u(0.732_051),
                }
            } else {
                JumpParams {
                    rate: 0.0,
                    mean: 0.0,
                    vol: 0.0,
                }
            };
            let (kind, q) = if i % 3 == 0 {
                (OptionKind::Call, 0.04)
            } else {
                (OptionKind::Put, 0.0)
            };
            Contract::new(
                kind,
                100.0,
                80.0 + 40.0 * u(0.236_068),
                0.1 + 1.9 * u(0.316_228),
                0.03,
                q,
                0.15 + 0.3 * u(0.154_701),
                jumps,
            )
            .unwrap()
        })
        .collect()
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let none = JumpParams {
        rate: 0.0,
        mean: 0.0,
        vol: 0.0,
    };
    let dfv = JumpParams {
        rate: 0.1,
        mean: -0.9,
        vol: 0.45,
    };
    let rows = match args.get(1).map(String::as_str) {
        Some("nojump") => {
            vec![Contract::new(OptionKind::Put, 100.0, 100.0, 1.0, 0.05, 0.0, 0.3, none).unwrap()]
        }
        Some("dhfv") => {
            vec![Contract::new(OptionKind::Put, 100.0, 100.0, 0.25, 0.05, 0.0, 0.15, dfv).unwrap()]
        }
        Some("book") => book(args.get(2).map_or(200, |s| s.parse().expect("row count"))),
        _ => panic!("usage: pide_profile nojump|dhfv|book [rows]"),
    };
    let mut levels = [0usize; 12];
    for c in &rows {
        match pide::price(c, Exercise::American, &PideConfig::default()) {
            Ok(r) => {
                levels[r.levels.min(11)] += 1;
                if rows.len() == 1 {
                    println!("{r:?}");
                }
            }
            Err(e) => println!("{c:?}: {e}"),
        }
    }
    println!("rows by levels solved: {levels:?}");
}
