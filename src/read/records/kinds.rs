//! What one record of a layout with kinds, a channel map or an edge flag stands for: a
//! time tag on one of our channels (or dropped by the edge choice), an overflow, a record
//! to skip, or a value the layout does not know. Shared by the serial and parallel passes.

use super::super::layout::{EdgeKeep, KindAction, RecordLayout};
use crate::Channel;

/// One record, classified.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Class {
    /// A time tag: raw counter, our channel, and whether the edge choice keeps it.
    Tag { raw: u64, channel: Channel, keep: bool },
    /// An overflow record adding `count` counter periods.
    Overflow(u64),
    /// An ignored kind.
    Skip,
    /// A kind value not in the layout's table.
    UnknownKind(u64),
    /// A raw channel value not in the channel map.
    Unmapped(i64),
}

/// Classifies records of one layout.
pub(super) struct Classifier<'a> {
    layout: &'a RecordLayout,
    mask: u64,
}

impl<'a> Classifier<'a> {
    pub(super) fn new(layout: &'a RecordLayout) -> Self {
        Classifier { layout, mask: super::ticks::counter_mask(layout) }
    }

    #[inline]
    pub(super) fn classify(&self, r: &[u8]) -> Class {
        let l = self.layout;
        if let Some(k) = &l.kinds {
            let v = k.field.get(r);
            match k.table.get(&v) {
                None => return Class::UnknownKind(v),
                Some(KindAction::Ignore) => return Class::Skip,
                Some(KindAction::Overflow) => return Class::Overflow(1),
                Some(KindAction::OverflowCounted) => return Class::Overflow(k.overflow_count.map_or(1, |c| c.get(r))),
                Some(&KindAction::Marker(channel)) => return Class::Tag { raw: l.time.get(r) & self.mask, channel, keep: true },
                Some(KindAction::Event) => {}
            }
        }
        let mut channel = match &l.channel_map {
            Some(m) => {
                let raw = l.channel.get_signed(r);
                match m.get(&raw) {
                    Some(&c) => c,
                    None => return Class::Unmapped(raw),
                }
            }
            // `check` keeps unmapped channel fields within 32 bits.
            None => l.channel.get(r) as Channel,
        };
        let mut keep = true;
        if let Some(e) = &l.edge {
            let falling = e.field.get(r) == e.falling_value;
            keep = match e.keep {
                EdgeKeep::Rising => !falling,
                EdgeKeep::Falling => falling,
                EdgeKeep::Both => true,
            };
            if falling {
                channel = channel.saturating_add(e.falling_add);
            }
        }
        Class::Tag { raw: l.time.get(r) & self.mask, channel, keep }
    }
}
