//! Write a seed corpus of small, valid index files for the loader's fuzz targets.
//!
//! ```text
//! cargo run --release -p boxwood-core --example fuzz_seeds -- rust_core/fuzz/corpus/seeds
//! ```
//!
//! Every size the tree shape changes at (empty, one row, a partial first bit line, a few
//! lines), both layouts, each weight encoding and each pair of key domains appear, so the
//! fuzzer starts from files that reach every section kind. The coordinates are small numbers
//! with ties, so that query bounds drawn from a few bytes land among the keys.

use std::path::{Path, PathBuf};

use boxwood_core::{build, build_keyed, file, Column, KeyColumn, Layout, WeightColumn};

const SIZES: [usize; 5] = [0, 1, 5, 100, 1000];

#[derive(Clone, Copy, Debug)]
enum Weights {
    Unweighted,
    SmallIntegers,
    Floats,
    /// Integers too large for sums to stay in i64: stored as i128 prefix sums.
    HugeIntegers,
}

fn main() {
    let folder = std::env::args_os()
        .nth(1)
        .map(PathBuf::from)
        .unwrap_or_else(|| {
            eprintln!("usage: fuzz_seeds FOLDER");
            std::process::exit(2);
        });
    std::fs::create_dir_all(&folder).expect("create the seed folder");
    let mut written = 0;
    for n in SIZES {
        for layout in [Layout::Fast, Layout::Compact] {
            for (i, weights) in [
                Weights::Unweighted,
                Weights::SmallIntegers,
                Weights::Floats,
                Weights::HugeIntegers,
            ]
            .into_iter()
            .enumerate()
            {
                // Cycle through the four pairs of key domains.
                let (x_float, y_float) = (i % 2 == 0, i / 2 == 0);
                write_seed(&folder, n, layout, weights, x_float, y_float);
                written += 1;
            }
        }
    }
    // Keyed trees: the key flag, the key offsets, x sorted within each key's run.
    for n in SIZES {
        for layout in [Layout::Fast, Layout::Compact] {
            write_keyed_seed(&folder, n, layout);
            written += 1;
        }
    }
    println!("wrote {written} seed files to {}", folder.display());
}

fn write_keyed_seed(folder: &Path, n: usize, layout: Layout) {
    // Invented docks again, each return tagged with one of five stations.
    let xs: Vec<f64> = (0..n)
        .map(|i| ((i * 37) % 101) as f64 * 0.5 - 25.0)
        .collect();
    let ys: Vec<i64> = (0..n).map(|i| ((i * 53) % 89) as i64 - 40).collect();
    let codes: Vec<u32> = (0..n).map(|i| ((i * 3) % 5) as u32).collect();
    let keys = KeyColumn {
        codes: &codes,
        count: 5,
    };
    let tree = build_keyed(Column::F64(&xs), Column::I64(&ys), None, Some(keys), layout)
        .expect("seed trees are valid");
    let mut bytes = Vec::new();
    file::write_index(&tree, &[], &mut bytes).expect("write to memory");
    let name = format!("n{n}-{}-keyed.boxwood", layout.name());
    std::fs::write(folder.join(name), bytes).expect("write a seed file");
}

fn write_seed(
    folder: &Path,
    n: usize,
    layout: Layout,
    weights: Weights,
    x_float: bool,
    y_float: bool,
) {
    // Invented dock positions of a bike-share city: small values with many ties.
    let xs: Vec<i64> = (0..n).map(|i| ((i * 37) % 101) as i64 - 50).collect();
    let ys: Vec<i64> = (0..n).map(|i| ((i * 53) % 89) as i64 - 40).collect();
    let xf: Vec<f64> = xs.iter().map(|&v| v as f64 * 0.5).collect();
    let yf: Vec<f64> = ys.iter().map(|&v| v as f64 * 0.25).collect();
    let x = if x_float {
        Column::F64(&xf)
    } else {
        Column::I64(&xs)
    };
    let y = if y_float {
        Column::F64(&yf)
    } else {
        Column::I64(&ys)
    };
    let small: Vec<i64> = (0..n as i64).map(|i| i % 7 - 3).collect();
    let floats: Vec<f64> = (0..n).map(|i| (i % 11) as f64 * 0.75 - 2.0).collect();
    let huge: Vec<i64> = (0..n as i64)
        .map(|i| (i64::MAX / 3) * (i % 2 * 2 - 1))
        .collect();
    let w = match weights {
        Weights::Unweighted => None,
        Weights::SmallIntegers => Some(WeightColumn::I64(&small)),
        Weights::Floats => Some(WeightColumn::F64(&floats)),
        Weights::HugeIntegers => Some(WeightColumn::I64(&huge)),
    };
    let tree = build(x, y, w, layout).expect("seed trees are valid");
    let attachments: &[&[u8]] = if n % 2 == 1 {
        &[b"{\"city\": \"Larkhaven\"}"]
    } else {
        &[]
    };
    let mut bytes = Vec::new();
    file::write_index(&tree, attachments, &mut bytes).expect("write to memory");
    let name = format!(
        "n{n}-{}-{weights:?}-x{}-y{}.boxwood",
        layout.name(),
        if x_float { "f64" } else { "i64" },
        if y_float { "f64" } else { "i64" },
    );
    std::fs::write(folder.join(name), bytes).expect("write a seed file");
}
