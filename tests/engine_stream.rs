//! The streaming path equals the whole-file path bit for bit, for any chunking of the
//! same time-ordered events (chunk cuts may fall between equal timestamps).

use proptest::prelude::*;
use tagsieve::engine::{self, scan, sweep, CountConfig, Criterion, Delays, ScanConfig};
use tagsieve::{Channel, ChannelTags};

/// Chunks of the time-ordered merge of all channels, cut at the given global indices.
fn chunked(tags: &[ChannelTags<'_>], cuts: &[usize]) -> Vec<Vec<ChannelTags<'static>>> {
    let mut all: Vec<(u64, Channel)> = tags.iter().flat_map(|t| t.times_ps.iter().map(move |&x| (x, t.channel))).collect();
    all.sort_unstable();
    let mut bounds: Vec<usize> = cuts.iter().map(|&c| c % (all.len() + 1)).collect();
    bounds.push(0);
    bounds.push(all.len());
    bounds.sort_unstable();
    bounds
        .windows(2)
        .map(|w| {
            let mut per: std::collections::BTreeMap<Channel, Vec<u64>> = Default::default();
            for &(x, c) in &all[w[0]..w[1]] {
                per.entry(c).or_default().push(x);
            }
            per.into_iter().map(|(c, v)| ChannelTags::owned(c, "", v)).collect()
        })
        .collect()
}

fn streams() -> impl Strategy<Value = Vec<ChannelTags<'static>>> {
    prop::collection::vec(prop::collection::vec(0u64..5000, 0..80), 3).prop_map(|vs| {
        vs.into_iter()
            .enumerate()
            .map(|(i, mut v)| {
                v.sort_unstable();
                ChannelTags::owned(i as Channel + 1, "", v)
            })
            .filter(|t| !t.is_empty())
            .collect()
    })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 200, ..ProptestConfig::default() })]

    #[test]
    fn streaming_equals_whole_file(
        tags in streams(), cuts in prop::collection::vec(0usize..300, 0..6),
        d2 in -300i64..300, d3 in -300i64..300, window in 1u64..200, slice in 1u64..3000,
    ) {
        prop_assume!(tags.len() >= 2);
        let mut delays = Delays::default();
        delays.by_channel.insert(2, d2);
        delays.by_channel.insert(3, d3);
        let cfg = CountConfig { pairs: vec![], delays: delays.clone(), window_ps: window, offsets_ps: vec![-700, 450], slice_ps: slice };
        let chunks = chunked(&tags, &cuts);

        let whole = engine::count_block("b", &tags, &cfg).unwrap();
        let streamed = engine::count::count_stream("b", chunks.clone().into_iter().map(Ok), &cfg).unwrap();
        // Debug text: equal strings mean equal bits (NaN ≠ NaN under ==).
        prop_assert_eq!(format!("{whole:?}"), format!("{streamed:?}"));

        let windows = [window, window + 7, 2 * window];
        for offpeak in [sweep::OffPeak::Fixed(cfg.offsets_ps.clone()), sweep::OffPeak::PerWindow] {
            let sw = engine::sweep_block(&tags, &cfg, &windows, &offpeak, Criterion::MaxNetSignificance).unwrap();
            let (_, _, ss) = sweep::sweep_stream(chunks.clone().into_iter().map(Ok), &cfg, &windows, &offpeak, Criterion::MaxNetSignificance).unwrap();
            prop_assert_eq!(format!("{sw:?}"), format!("{ss:?}"));
        }

        let scfg = ScanConfig { pairs: vec![], delays, half_range_ps: 400, bin_ps: 7 };
        let hw = engine::scan_block(&tags, &scfg).unwrap();
        let (_, _, hs) = scan::scan_stream(chunks.into_iter().map(Ok), &scfg).unwrap();
        prop_assert_eq!(format!("{hw:?}"), format!("{hs:?}"));
    }
}
