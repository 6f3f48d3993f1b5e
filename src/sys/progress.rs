//! Progress bars on stderr for long passes: bytes done, events/s, ETA. Silent with
//! `--quiet` or when stderr is not a terminal.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;

/// A progress reporter; a no-op when hidden.
#[derive(Clone)]
pub struct Progress {
    bar: ProgressBar,
    events: std::sync::Arc<std::sync::atomic::AtomicU64>,
}

impl Progress {
    /// A bar over `total_bytes`, labelled `what`. Hidden when `quiet` or stderr is no TTY.
    pub fn bytes(what: &str, total_bytes: u64, quiet: bool) -> Self {
        let bar = ProgressBar::with_draw_target(Some(total_bytes), Self::target(quiet));
        bar.set_style(
            ProgressStyle::with_template("{prefix:>10} [{bar:30}] {bytes}/{total_bytes} {binary_bytes_per_sec} {msg} eta {eta}")
                .expect("static template")
                .progress_chars("=> "),
        );
        bar.set_prefix(what.to_string());
        Progress { bar, events: Default::default() }
    }

    /// A bar over `total` items (events, blocks), labelled `what`.
    pub fn items(what: &str, total: u64, quiet: bool) -> Self {
        let bar = ProgressBar::with_draw_target(Some(total), Self::target(quiet));
        bar.set_style(
            ProgressStyle::with_template("{prefix:>10} [{bar:30}] {human_pos}/{human_len} {per_sec} eta {eta}")
                .expect("static template")
                .progress_chars("=> "),
        );
        bar.set_prefix(what.to_string());
        Progress { bar, events: Default::default() }
    }

    /// A hidden reporter (library use, tests).
    pub fn hidden() -> Self {
        Progress { bar: ProgressBar::hidden(), events: Default::default() }
    }

    fn target(quiet: bool) -> ProgressDrawTarget {
        if quiet || !std::io::stderr().is_terminal() {
            ProgressDrawTarget::hidden()
        } else {
            ProgressDrawTarget::stderr()
        }
    }

    pub fn inc(&self, n: u64) {
        self.bar.inc(n);
    }

    /// Advance by `bytes` that held `events` tags; the message shows the event rate.
    pub fn inc_events(&self, bytes: u64, events: u64) {
        use std::sync::atomic::Ordering;
        let total = self.events.fetch_add(events, Ordering::Relaxed) + events;
        self.bar.inc(bytes);
        if !self.bar.is_hidden() {
            let secs = self.bar.elapsed().as_secs_f64().max(1e-3);
            self.bar.set_message(format!("{} events/s", crate::units::fmt_count((total as f64 / secs) as u64)));
        }
    }
    pub fn set_message(&self, msg: impl Into<String>) {
        self.bar.set_message(msg.into());
    }
    pub fn finish(&self) {
        self.bar.finish_and_clear();
    }
}
