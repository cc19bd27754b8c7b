//! Times the count path at one size, split into its parts: root searches alone (boxes empty
//! in y), then whole counts, for small squares, large squares and thin slabs.
//!
//! `cargo run --release -p boxwood-core --example count_probe -- 10000000 200000`
//! (points, boxes). Uniform points; prints boxes per second of each batch, best of 3.

use std::time::Instant;

use boxwood_core::{build, Bound, BoundColumn, BoxBounds, Boxes, Column, Inclusive, Layout};

#[path = "../benches/support/rng.rs"]
mod rng;
use rng::Rng;

fn main() {
    let args: Vec<usize> = std::env::args()
        .skip(1)
        .map(|a| a.parse().expect("sizes are integers"))
        .collect();
    let n = args.first().copied().unwrap_or(10_000_000);
    let q = args.get(1).copied().unwrap_or(200_000);
    let mut rng = Rng(7);
    let (x, y) = (rng.column(n), rng.column(n));
    // The first build in a process also pays for the process's first touch of its memory.
    let mut builds = Vec::new();
    for _ in 0..3 {
        let t0 = Instant::now();
        let tree = build(Column::F64(&x), Column::F64(&y), None, Layout::Compact).unwrap();
        builds.push((t0.elapsed().as_secs_f64(), tree));
    }
    let times: Vec<String> = builds.iter().map(|(t, _)| format!("{t:.2}")).collect();
    let tree = builds.pop().expect("three builds").1;
    drop(builds);
    println!(
        "n = {n}: builds {} s, nbytes {}",
        times.join(", "),
        tree.nbytes()
    );
    let side = |target: f64| (target / n as f64).sqrt();
    let shapes = [
        ("root searches only", side(300.0), side(300.0), true),
        ("small squares", side(300.0), side(300.0), false),
        ("large squares", side(20_000.0), side(20_000.0), false),
        ("thin slabs", 0.5, 2_000.0 / n as f64 / 0.5, false),
    ];
    for (name, wx, wy, empty) in shapes {
        let x_lo = rng.column(q);
        let y_lo = rng.column(q);
        let x_hi: Vec<f64> = x_lo.iter().map(|v| v + wx).collect();
        let y_hi: Vec<f64> = if empty {
            y_lo.iter().map(|v| v - 1.0).collect()
        } else {
            y_lo.iter().map(|v| v + wy).collect()
        };
        let boxes = Boxes {
            x_lo: BoundColumn::F64(&x_lo),
            x_hi: BoundColumn::F64(&x_hi),
            y_lo: BoundColumn::F64(&y_lo),
            y_hi: BoundColumn::F64(&y_hi),
        };
        let mut out = vec![0i64; q];
        let mut best = f64::INFINITY;
        for _ in 0..3 {
            let t = Instant::now();
            tree.count_batch(&boxes, Inclusive::Both, &mut out).unwrap();
            best = best.min(t.elapsed().as_secs_f64());
        }
        let mean = out.iter().sum::<i64>() as f64 / q as f64;
        println!(
            "{name:>20}: {:>10.0} boxes/s  (mean {mean:.0} points a box)",
            q as f64 / best
        );
    }
    // One box a call, as row-by-row code asks: random positions, so each starts cold.
    let side = side(300.0);
    let calls: Vec<BoxBounds> = (0..q)
        .map(|_| {
            let (a, c) = (rng.unit(), rng.unit());
            BoxBounds {
                x_lo: Bound::F64(a),
                x_hi: Bound::F64(a + side),
                y_lo: Bound::F64(c),
                y_hi: Bound::F64(c + side),
            }
        })
        .collect();
    let t = Instant::now();
    let mut ranks = 0;
    for b in &calls {
        let r = tree.rank_box(b, Inclusive::Both).unwrap();
        ranks += r.x.1 - r.x.0;
    }
    let rank_us = t.elapsed().as_secs_f64() / q as f64 * 1e6;
    let t = Instant::now();
    let mut total = 0;
    for b in &calls {
        total += tree.count(b, Inclusive::Both).unwrap();
    }
    let count_us = t.elapsed().as_secs_f64() / q as f64 * 1e6;
    let t = Instant::now();
    for _ in 0..q {
        total += tree.count(&calls[0], Inclusive::Both).unwrap();
    }
    let warm_us = t.elapsed().as_secs_f64() / q as f64 * 1e6;
    println!("  the same box again and again (in cache): {warm_us:.2} us a call");
    println!(
        "  one box a call: {rank_us:.2} us root searches, {count_us:.2} us whole count \
         (checksums {ranks} {total})"
    );
}
