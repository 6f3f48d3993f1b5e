//! CPU-feature detection, once per process, with one override: `TAGSIEVE_ISA=portable|avx2`
//! lowers what the vector code paths use, so tests can force the portable paths everywhere.

/// The vector instruction set the hot loops (engine lanes, readers' order check) run with.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum Isa {
    Portable,
    Avx2,
    Avx512,
}

/// The best [`Isa`] this CPU has (detected once; `TAGSIEVE_ISA=portable|avx2` lowers it,
/// so tests can run every variant on one machine). The one switch for every vector path
/// that asks here: the engine's lanes and the readers' order check alike.
pub fn isa() -> Isa {
    static ISA: std::sync::OnceLock<Isa> = std::sync::OnceLock::new();
    *ISA.get_or_init(|| {
        let best = detect();
        match std::env::var("TAGSIEVE_ISA").as_deref() {
            Ok("portable") => Isa::Portable,
            Ok("avx2") if best == Isa::Avx512 => Isa::Avx2,
            _ => best,
        }
    })
}

/// The best [`Isa`] the CPU has, ignoring `TAGSIEVE_ISA`.
pub fn detect() -> Isa {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx512f") && std::arch::is_x86_feature_detected!("popcnt") {
            return Isa::Avx512;
        }
        if std::arch::is_x86_feature_detected!("avx2") && std::arch::is_x86_feature_detected!("popcnt") {
            return Isa::Avx2;
        }
    }
    Isa::Portable
}
