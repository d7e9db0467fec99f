use saltus::model::*;
use std::time::Instant;
fn main() {
    let one = Contract::new(
        OptionKind::Call,
        100.0,
        100.0,
        0.25,
        0.05,
        0.0,
        0.15,
        JumpParams {
            rate: 0.1,
            mean: -0.9,
            vol: 0.45,
        },
    )
    .unwrap();
    let r = saltus::series::price(&one).unwrap();
    println!("dhfv terms {}", r.terms);
    let lam0 = Contract::new(
        OptionKind::Call,
        100.0,
        100.0,
        0.25,
        0.05,
        0.0,
        0.15,
        JumpParams {
            rate: 0.0,
            mean: -0.9,
            vol: 0.45,
        },
    )
    .unwrap();
    for (name, c) in [("dhfv", one), ("lam0", lam0)] {
        let n = 2_000_000;
        let t = Instant::now();
        let mut a = 0.0;
        for _ in 0..n {
            a += saltus::series::price(std::hint::black_box(&c))
                .unwrap()
                .greeks
                .price;
        }
        println!(
            "{name} {:.1} ns {a}",
            t.elapsed().as_nanos() as f64 / n as f64
        );
    }
}
