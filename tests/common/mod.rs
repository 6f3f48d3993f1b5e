//! Shared helpers for the end-to-end tests.
#![allow(dead_code)]

use std::path::PathBuf;
use std::process::Command;

/// The built `tagsieve` binary.
pub fn tagsieve() -> Command {
    Command::new(env!("CARGO_BIN_EXE_tagsieve"))
}

/// The project root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The Python interpreter with NumPy, SciPy and h5py (the outside references):
/// `$TAGSIEVE_PYTHON`, else `.venv/bin/python` made by `tools/setup.sh`.
/// Panics with a clear message when neither exists: these checks are not optional.
pub fn python() -> Command {
    let p = std::env::var_os("TAGSIEVE_PYTHON")
        .map(PathBuf::from)
        .unwrap_or_else(|| root().join(".venv/bin/python"));
    assert!(p.exists(), "no Python with NumPy/h5py at {}: run tools/setup.sh first", p.display());
    Command::new(p)
}

/// SplitMix64 (Steele, Lea, Flood, OOPSLA 2014): a small, well-known generator, so the
/// tests' randomness does not come from project code.
pub struct SplitMix64(pub u64);

impl SplitMix64 {
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    /// Uniform in (0, 1): never 0, so its logarithm is finite.
    pub fn uniform_open(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Poisson(λ): Knuth's product method on pieces of λ ≤ 200 (a sum of independent
    /// Poisson variables is Poisson), so e^{−λ} never underflows.
    pub fn poisson(&mut self, lambda: f64) -> u64 {
        if lambda > 200.0 {
            return self.poisson(lambda / 2.0) + self.poisson(lambda / 2.0);
        }
        let limit = (-lambda).exp();
        let (mut k, mut p) = (0u64, self.uniform());
        while p > limit {
            k += 1;
            p *= self.uniform();
        }
        k
    }
    /// Multinomial draw of `n` events over four cells with probabilities `p`.
    pub fn multinomial4(&mut self, n: u64, p: [f64; 4]) -> [u64; 4] {
        let mut out = [0u64; 4];
        for _ in 0..n {
            let u = self.uniform();
            let mut acc = 0.0;
            let mut cell = 3;
            for (i, pi) in p.iter().enumerate() {
                acc += pi;
                if u < acc {
                    cell = i;
                    break;
                }
            }
            out[cell] += 1;
        }
        out
    }
}

/// A group or table of a Document in JSON (`--json`, `--format json`; docs/hdf5-layout.md):
/// `/blocks/block/coincidences` is `doc["groups"]["blocks"]["groups"]["block"]["tables"]
/// ["coincidences"]`. `Null` where there is none.
pub fn doc_at<'a>(doc: &'a serde_json::Value, path: &str) -> &'a serde_json::Value {
    let parts: Vec<&str> = path.split('/').filter(|p| !p.is_empty()).collect();
    let mut v = doc;
    for (i, name) in parts.iter().enumerate() {
        if i + 1 == parts.len() && v["tables"].get(*name).is_some() {
            return &v["tables"][*name];
        }
        v = &v["groups"][*name];
    }
    v
}

/// The rows of a Document table as objects keyed by column name (a histogram's extra
/// `bin_edges_ps` element is left out of the rows). Panics when there is no such table.
pub fn doc_rows(doc: &serde_json::Value, path: &str) -> Vec<serde_json::Value> {
    let cols = doc_at(doc, path)["columns"].as_object().unwrap_or_else(|| panic!("no table {path} in {doc}"));
    let n = cols.values().map(|c| c["data"].as_array().unwrap().len()).min().unwrap_or(0);
    (0..n)
        .map(|i| serde_json::Value::Object(cols.iter().map(|(k, c)| (k.clone(), c["data"][i].clone())).collect()))
        .collect()
}
