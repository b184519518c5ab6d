//! Times one matrix-free product in the momentum-0, reflection-even sector of the
//! unit-filled Bose–Hubbard ring beside the full-space product (medians of `repeats`).
//! Not a test: `cargo run -p fockmill-core --release --example sector_profile -- 13 5`.

use fockmill_core::matvec::Product;
use fockmill_core::parallel::{NoInterrupt, Runner};
use fockmill_core::space::FockSpace;
use fockmill_core::symmetry::{Generator, SectorOperator, SymmetricSpace};
use fockmill_core::terms::{Operator, RawTerm};
use std::time::Instant;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(|a, b| a.partial_cmp(b).unwrap());
    v[v.len() / 2]
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let l: usize = args.get(1).map_or(13, |s| s.parse().unwrap());
    let repeats: usize = args.get(2).map_or(5, |s| s.parse().unwrap());
    let threads: Option<usize> = args.get(3).map(|s| s.parse().unwrap());
    let full_too = args.get(4).is_none_or(|s| s != "nofull");
    let runner = Runner::with_threads(threads).unwrap();
    let base = FockSpace::new(vec![l as u32; l], None, Some(l as u64), None).unwrap();
    let mut raw = Vec::new();
    for i in 0..l {
        let k = (i + 1) % l;
        let (a, b) = if i < k { (i, k) } else { (k, i) };
        raw.push(RawTerm::new(-1.0, 0.0, vec![(a, 1, 0), (b, 0, 1)]));
        raw.push(RawTerm::new(-1.0, 0.0, vec![(a, 0, 1), (b, 1, 0)]));
        raw.push(RawTerm::new(0.5, 0.0, vec![(i, 2, 2)]));
    }
    let op = Operator::<f64>::new(&base, &raw).unwrap();
    let g = [
        Generator {
            images: (0..l).map(|i| (i + 1) % l).collect(),
            label: 0,
        },
        Generator {
            images: (0..l).map(|i| l - 1 - i).collect(),
            label: 0,
        },
    ];
    let t0 = Instant::now();
    let s = SymmetricSpace::new(base.clone(), &g, &runner, &NoInterrupt).unwrap();
    let t_enum = t0.elapsed().as_secs_f64();
    let sop = SectorOperator::new(&s, &op, &g).unwrap();
    let d = s.dim() as usize;
    let x: Vec<f64> = (0..d).map(|i| ((i * 7919) % 101) as f64 - 50.0).collect();
    let mut y = vec![0.0; d];
    let mut ts = Vec::new();
    for _ in 0..repeats {
        let t = Instant::now();
        sop.apply_many(&s, &x, &mut y, 1, &runner, &NoInterrupt).unwrap();
        ts.push(t.elapsed().as_secs_f64());
    }
    let ts = median(ts);
    let check: f64 = y.iter().enumerate().map(|(i, v)| v * ((i % 7) as f64)).sum();
    println!("L={l} threads={} sector dim {d} enumerate {t_enum:.3}s product {:.2} ms ({:.1} ns/row) check {check:.6e}",
        runner.threads(), ts * 1e3, ts * 1e9 / d as f64);
    if full_too {
        let p = Product::new(&base, &op);
        let n = base.dim() as usize;
        let xf: Vec<f64> = (0..n).map(|i| ((i * 7919) % 101) as f64 - 50.0).collect();
        let mut yf = vec![0.0; n];
        let mut tf = Vec::new();
        for _ in 0..repeats {
            let t = Instant::now();
            p.apply(&base, &xf, &mut yf, &runner, &NoInterrupt).unwrap();
            tf.push(t.elapsed().as_secs_f64());
        }
        let tf = median(tf);
        println!(
            "full dim {n} product {:.2} ms ({:.2} ns/row); ratio per row {:.1}",
            tf * 1e3,
            tf * 1e9 / n as f64,
            (ts / d as f64) / (tf / n as f64)
        );
    }
}
