//! The simulator's contract with its callers: same seed → same tags on any thread count,
//! tags sorted and inside the block, no two tags on a channel closer than the dead time.

mod simulate_common;

use simulate_common::deg;
use tagsieve::simulate::{scenario_detectors, simulate_block, SourceModel};
use tagsieve::ChannelTags;

/// A short, busy block: 2 MHz pairs for 200 ms, so it spans several chunks (about 2¹⁶ pairs each).
fn run(seed: u64) -> Vec<ChannelTags<'static>> {
    let src = SourceModel { pair_rate_hz: 2.0e6, ..SourceModel::scenario() };
    simulate_block(&src, &scenario_detectors(), deg(0.0, 22.5), 200_000_000_000, seed).unwrap()
}

fn in_pool(threads: usize, seed: u64) -> Vec<ChannelTags<'static>> {
    rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap().install(|| run(seed))
}

fn same(a: &[ChannelTags<'static>], b: &[ChannelTags<'static>]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.channel == y.channel && x.times_ps == y.times_ps)
}

#[test]
fn same_seed_same_tags_on_any_thread_count() {
    let one = in_pool(1, 42);
    assert!(one.iter().all(|c| c.len() > 20_000), "a busy block");
    assert!(same(&one, &in_pool(2, 42)));
    assert!(same(&one, &in_pool(4, 42)));
    assert!(same(&one, &run(42)));
}

#[test]
fn different_seeds_differ() {
    assert!(!same(&run(1), &run(2)));
}

#[test]
fn channels_ordered_tags_sorted_and_inside_the_block() {
    let tags = run(3);
    let names: Vec<(u32, &str)> = tags.iter().map(|c| (c.channel, c.name.as_str())).collect();
    assert_eq!(names, [(1, "larch_plus"), (2, "larch_minus"), (3, "rowan_plus"), (4, "rowan_minus")]);
    for c in &tags {
        assert!(c.times_ps.windows(2).all(|w| w[0] <= w[1]), "channel {} unsorted", c.channel);
        assert!(c.times_ps.last().is_some_and(|&t| t < 200_000_000_000));
    }
}

/// Non-paralyzable dead time: consecutive kept tags are at least the dead time apart
/// (common practice, no source); the scenario's 22 ns at 2 MHz pairs is often hit.
#[test]
fn dead_time_is_respected() {
    let dead = scenario_detectors()[0].dead_time_ps;
    for c in run(4) {
        let closest = c.times_ps.windows(2).map(|w| w[1] - w[0]).min().unwrap();
        assert!(closest >= dead, "channel {}: two tags {closest} ps apart", c.channel);
    }
    let mut no_dead = scenario_detectors();
    for d in &mut no_dead {
        d.dead_time_ps = 0;
    }
    let src = SourceModel { pair_rate_hz: 2.0e6, ..SourceModel::scenario() };
    let raw = simulate_block(&src, &no_dead, deg(0.0, 22.5), 200_000_000_000, 4).unwrap();
    let closest = raw[0].times_ps.windows(2).map(|w| w[1] - w[0]).min().unwrap();
    assert!(closest < dead, "without dead time some tags are closer than {dead} ps");
}
