//! Engine benchmarks on 256 MiB of synthetic two-channel tags held in memory: one count
//! at w = 1 ns, the same with the ten off-peak windows `tagsieve count` adds, a ±20 ns
//! delay scan in 50 ps bins, and beside them a plain sum over the same slices (the
//! memory-read rate). All on a rayon pool of 2 threads, reported in bytes per second.

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use rayon::prelude::*;
use tagsieve::engine::{accidentals, parallel};
use tagsieve::simulate::rng::Rng;

/// Both channels together: 256 MiB of u64 tags.
const TOTAL_BYTES: usize = 256 << 20;
/// Source events per second and the chance each reaches a detector (per side).
const SOURCE_RATE_HZ: f64 = 4.0e6;
const DETECT_PROB: f64 = 0.45;
/// Relative delay of B, ps, and the ± spread of B's partner times (uniform), ps.
const DELTA_PS: i64 = 41_250;
const JITTER_PS: u64 = 150;
const THREADS: usize = 2;

/// Correlated Poisson-like channels from the simulator's small PRNG: exponential source
/// gaps; each source event reaches A and, independently, B (delayed by δ, jittered) with
/// DETECT_PROB. B is sorted after jitter. Stops when both together reach `total_bytes`.
fn synthetic(total_bytes: usize) -> (Vec<u64>, Vec<u64>) {
    let mut rng = Rng::new(0x7a6_51e7e);
    let (mut a, mut b) = (Vec::new(), Vec::new());
    let mean_gap_ps = 1e12 / SOURCE_RATE_HZ;
    let mut t = 1_000_000.0f64;
    while (a.len() + b.len()) * 8 < total_bytes {
        t += rng.exponential(mean_gap_ps);
        let t_ps = t as u64;
        if rng.bernoulli(DETECT_PROB) {
            a.push(t_ps);
        }
        if rng.bernoulli(DETECT_PROB) {
            let jitter = (rng.next_u64() % (2 * JITTER_PS + 1)) as i64 - JITTER_PS as i64;
            b.push((t_ps as i64 + DELTA_PS + jitter) as u64);
        }
    }
    b.sort_unstable();
    (a, b)
}

fn sum(v: &[u64]) -> u64 {
    v.par_chunks(parallel::CHUNK_EVENTS).map(|c| c.iter().fold(0u64, |x, &y| x.wrapping_add(y))).reduce(|| 0, u64::wrapping_add)
}

fn engine(c: &mut Criterion) {
    let (a, b) = synthetic(TOTAL_BYTES);
    let bytes = ((a.len() + b.len()) * 8) as u64;
    let pool = rayon::ThreadPoolBuilder::new().num_threads(THREADS).build().expect("rayon pool");
    let offsets: Vec<i64> = std::iter::once(0).chain(accidentals::default_offsets_ps(1000)).map(|o| DELTA_PS + o).collect();
    let mut g = c.benchmark_group("engine_256MiB_2threads");
    g.throughput(Throughput::Bytes(bytes)).sample_size(10);
    g.bench_function("sum (memory read)", |bn| bn.iter(|| pool.install(|| sum(black_box(&a)).wrapping_add(sum(black_box(&b))))));
    g.bench_function("count w=1ns", |bn| bn.iter(|| pool.install(|| parallel::count_window(black_box(&a), &b, DELTA_PS, 500))));
    g.bench_function("count w=1ns + 10 off-peak", |bn| bn.iter(|| pool.install(|| parallel::count_windows(black_box(&a), &b, &offsets, 500))));
    g.bench_function("scan ±20ns 50ps bins", |bn| bn.iter(|| pool.install(|| parallel::histogram(black_box(&a), &b, DELTA_PS, 20_000, 50))));
    g.finish();
}

criterion_group!(benches, engine);
criterion_main!(benches);
