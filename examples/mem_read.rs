//! Memory-read reference for the engine benchmarks: map per-channel u64 files and sum
//! them on a rayon pool, reporting GB/s (tools/bench_engine.sh compares the engine to it).
//!
//! Usage: `mem_read THREADS FILE...`. Prints one line per pass; the first pass of a fresh
//! mapping includes the page faults a whole `tagsieve` process also pays.

use rayon::prelude::*;
use std::time::Instant;

/// Words per rayon task: the same order as the engine's chunks.
const CHUNK_WORDS: usize = 1 << 16;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let Some((threads, files)) = args.split_first() else {
        eprintln!("usage: mem_read THREADS FILE...");
        std::process::exit(2);
    };
    let threads: usize = threads.parse().expect("THREADS must be a count");
    let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().expect("rayon pool");
    let maps: Vec<memmap2::Mmap> = files.iter().map(|f| map(f)).collect();
    let slices: Vec<&[u64]> = maps.iter().map(|m| words(m)).collect();
    let bytes: usize = slices.iter().map(|s| s.len() * 8).sum();
    for pass in ["first touch", "warm 1", "warm 2", "warm 3"] {
        let t0 = Instant::now();
        let sum = pool.install(|| slices.iter().map(|s| sum_words(s)).fold(0u64, u64::wrapping_add));
        let s = t0.elapsed().as_secs_f64();
        println!("pass={pass:<11} bytes={bytes} seconds={s:.4} gb_per_s={:.2} sum={sum}", bytes as f64 / s / 1e9);
    }
}

fn map(path: &str) -> memmap2::Mmap {
    let f = std::fs::File::open(path).unwrap_or_else(|e| panic!("{path}: {e}"));
    // SAFETY: a benchmark input that nothing modifies while it runs.
    unsafe { memmap2::Mmap::map(&f) }.unwrap_or_else(|e| panic!("{path}: {e}"))
}

fn words(m: &memmap2::Mmap) -> &[u64] {
    // SAFETY: a mapping is page-aligned, and any bit pattern is a valid u64.
    let (head, body, _) = unsafe { m.align_to::<u64>() };
    assert!(head.is_empty());
    body
}

/// Plain wrapping sum: one add per word, so the loop runs at the memory-read rate.
fn sum_words(s: &[u64]) -> u64 {
    s.par_chunks(CHUNK_WORDS).map(|c| c.iter().fold(0u64, |x, &y| x.wrapping_add(y))).reduce(|| 0, u64::wrapping_add)
}
