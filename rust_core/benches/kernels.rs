//! Criterion benchmarks of the engine's kernels: build, batched count, report (in walk order
//! and ordered), the sort of a box's rows, root ranks.
//!
//! `cargo bench -p boxwood-core` (or `make bench-rust`). Sizes are kept moderate so the whole
//! run takes a few minutes; the Python table in `benches/` covers n = 10^7.

use boxwood_core::{build, BoundColumn, Boxes, Column, Inclusive, Layout, RangeTree, RowSort};
use criterion::{criterion_group, criterion_main, BatchSize, Criterion, Throughput};

#[path = "support/rng.rs"]
mod rng;
use rng::Rng;

struct BoxSet {
    cols: [Vec<f64>; 4],
}

impl BoxSet {
    fn squares(rng: &mut Rng, q: usize, side: f64) -> Self {
        let x_lo = rng.column(q);
        let y_lo = rng.column(q);
        let x_hi = x_lo.iter().map(|v| v + side).collect();
        let y_hi = y_lo.iter().map(|v| v + side).collect();
        BoxSet {
            cols: [x_lo, x_hi, y_lo, y_hi],
        }
    }

    fn boxes(&self) -> Boxes<'_> {
        Boxes {
            x_lo: BoundColumn::F64(&self.cols[0]),
            x_hi: BoundColumn::F64(&self.cols[1]),
            y_lo: BoundColumn::F64(&self.cols[2]),
            y_hi: BoundColumn::F64(&self.cols[3]),
        }
    }
}

fn tree(n: usize, layout: Layout) -> RangeTree {
    let mut rng = Rng(7);
    let (x, y) = (rng.column(n), rng.column(n));
    build(Column::F64(&x), Column::F64(&y), None, layout).unwrap()
}

fn bench_build(c: &mut Criterion) {
    let n = 1_000_000;
    let mut rng = Rng(1);
    let (x, y) = (rng.column(n), rng.column(n));
    let mut g = c.benchmark_group("build");
    g.sample_size(10).throughput(Throughput::Elements(n as u64));
    for layout in [Layout::Fast, Layout::Compact] {
        g.bench_function(format!("{}_1e6", layout.name()), |b| {
            b.iter(|| build(Column::F64(&x), Column::F64(&y), None, layout).unwrap())
        });
    }
    g.finish();
}

fn bench_count(c: &mut Criterion) {
    let t = tree(1_000_000, Layout::Compact);
    let q = 100_000;
    let mut g = c.benchmark_group("count_batch");
    g.sample_size(10).throughput(Throughput::Elements(q as u64));
    for (name, side) in [("small_squares", 0.02), ("large_squares", 0.2)] {
        let set = BoxSet::squares(&mut Rng(3), q, side);
        let boxes = set.boxes();
        let mut out = vec![0i64; q];
        g.bench_function(name, |b| {
            b.iter(|| t.count_batch(&boxes, Inclusive::Both, &mut out).unwrap())
        });
    }
    g.finish();
}

fn bench_report(c: &mut Criterion) {
    let q = 1_000;
    let set = BoxSet::squares(&mut Rng(5), q, 0.1);
    let mut g = c.benchmark_group("report_batch");
    g.sample_size(10);
    for layout in [Layout::Fast, Layout::Compact] {
        let t = tree(1_000_000, layout);
        let boxes = set.boxes();
        let rows = t.report_batch(&boxes, Inclusive::Both).unwrap().rows.len();
        g.throughput(Throughput::Elements(rows as u64));
        g.bench_function(layout.name(), |b| {
            b.iter_batched(
                || (),
                |_| t.report_batch(&boxes, Inclusive::Both).unwrap(),
                BatchSize::LargeInput,
            )
        });
        g.bench_function(format!("{}_ordered", layout.name()), |b| {
            b.iter_batched(
                || (),
                |_| t.report_batch_ordered(&boxes, Inclusive::Both).unwrap(),
                BatchSize::LargeInput,
            )
        });
    }
    g.finish();
}

/// One box's row ids sorted, by comparison and by `RowSort`, at sizes around its threshold
/// and at the sizes of large boxes; ids uniform over [0, 10^7), as a box of a tree of 10^7
/// points holds them.
fn bench_row_sort(c: &mut Criterion) {
    let mut g = c.benchmark_group("row_sort");
    g.sample_size(20);
    for k in [64usize, 128, 256, 512, 1024, 4096, 20_000, 1 << 20] {
        let mut rng = Rng(11);
        let ids: Vec<u32> = (0..k).map(|_| (rng.unit() * 1e7) as u32).collect();
        // Many boxes a sample at small sizes, so a timing is not one short call.
        let copies = (1 << 16) / k + 1;
        g.throughput(Throughput::Elements((copies * k) as u64));
        let batch = ids.repeat(copies);
        g.bench_function(format!("sort_unstable_{k}"), |b| {
            b.iter_batched_ref(
                || batch.clone(),
                |v| v.chunks_mut(k).for_each(|box_ids| box_ids.sort_unstable()),
                BatchSize::LargeInput,
            )
        });
        let mut sorter = RowSort::default();
        g.bench_function(format!("radix_{k}"), |b| {
            b.iter_batched_ref(
                || batch.clone(),
                |v| v.chunks_mut(k).for_each(|box_ids| sorter.sort(box_ids)),
                BatchSize::LargeInput,
            )
        });
    }
    g.finish();
}

fn bench_rank(c: &mut Criterion) {
    // Boxes that are empty in y cost only their root searches.
    let t = tree(1_000_000, Layout::Compact);
    let q = 100_000;
    let mut set = BoxSet::squares(&mut Rng(9), q, 0.01);
    set.cols[3] = set.cols[2].iter().map(|v| v - 1.0).collect();
    let boxes = set.boxes();
    let mut out = vec![0i64; q];
    let mut g = c.benchmark_group("root_ranks");
    g.sample_size(10).throughput(Throughput::Elements(q as u64));
    g.bench_function("four_searches_per_box", |b| {
        b.iter(|| t.count_batch(&boxes, Inclusive::Both, &mut out).unwrap())
    });
    g.finish();
}

criterion_group!(
    kernels,
    bench_build,
    bench_count,
    bench_report,
    bench_row_sort,
    bench_rank
);
criterion_main!(kernels);
