//! Progress on long work (staircases, sweeps on a rig, reanalysis, trends, long files), drawn by
//! indicatif on stderr: the well-kept crate for terminal progress bars, thread-safe, so rayon's
//! workers can tick one bar. Nothing is drawn when stderr is not a terminal (a log, a pipe, a
//! test), and nothing ever goes to stdout, where `--json` and `--csv` write.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;

/// A bar, or nothing when it would not be seen. Cheap to clone; each clone ticks the same bar,
/// and the bar is cleared when the last clone goes (an early return never leaves it drawn).
#[derive(Clone)]
pub struct Progress(Option<std::sync::Arc<Bar>>);

/// The bar itself; cleared from the terminal when dropped.
pub struct Bar(ProgressBar);

impl Drop for Bar {
    fn drop(&mut self) {
        self.0.finish_and_clear();
    }
}

impl std::ops::Deref for Bar {
    type Target = ProgressBar;
    fn deref(&self) -> &ProgressBar {
        &self.0
    }
}

impl Progress {
    /// A bar of `len` steps labelled `what` ("blocks", "runs", ...), drawn only on a terminal;
    /// `len` may start at 0 and grow with [`Progress::extend`].
    pub fn new(len: u64, what: &str) -> Self {
        if !std::io::stderr().is_terminal() {
            return Progress(None);
        }
        let bar = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr());
        let style = ProgressStyle::with_template(&format!(
            "{{spinner}} {{msg}} [{{bar:30}}] {{pos}}/{{len}} {what} ({{elapsed}}, about {{eta}} left)"
        ))
        .unwrap_or_else(|_| ProgressStyle::default_bar())
        .progress_chars("=> ");
        bar.set_style(style);
        bar.enable_steady_tick(std::time::Duration::from_millis(200));
        Progress(Some(std::sync::Arc::new(Bar(bar))))
    }

    /// A bar that is never drawn (library callers and tests).
    pub fn hidden() -> Self {
        Progress(None)
    }

    /// Say what is being done now ("channel 2", "1000 Hz").
    pub fn message(&self, text: impl Into<String>) {
        if let Some(b) = &self.0 {
            b.set_message(text.into());
        }
    }

    pub fn inc(&self, n: u64) {
        if let Some(b) = &self.0 {
            b.inc(n);
        }
    }

    /// Grow the bar when the work turns out longer (a staircase refining across a target).
    pub fn extend(&self, n: u64) {
        if let Some(b) = &self.0 {
            b.inc_length(n);
        }
    }

    /// Drop the steps the bar counted on but that will not come (a staircase that stopped
    /// before full scale).
    pub fn settle(&self) {
        if let Some(b) = &self.0 {
            b.set_length(b.position());
        }
    }

    /// Remove the bar.
    pub fn finish(&self) {
        if let Some(b) = &self.0 {
            b.finish_and_clear();
        }
    }
}
