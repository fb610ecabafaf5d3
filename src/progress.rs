//! Progress on a terminal: a bar for long work and one-line notes. Silent with `--quiet`, when
//! standard error is not a terminal, and under CI (`CI` set).

use std::io::IsTerminal;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// How the run reports progress.
#[derive(Debug, Clone, Copy)]
pub struct Progress {
    bars: bool,
    notes: bool,
}

impl Progress {
    /// Bars only on an interactive terminal outside CI; notes unless `quiet`.
    #[must_use]
    pub fn new(quiet: bool) -> Self {
        let terminal = std::io::stderr().is_terminal() && std::env::var_os("CI").is_none();
        Self {
            bars: terminal && !quiet,
            notes: !quiet,
        }
    }

    /// No output at all (tests, library use).
    #[must_use]
    pub const fn silent() -> Self {
        Self {
            bars: false,
            notes: false,
        }
    }

    /// A bar counting bytes.
    #[must_use]
    pub fn bytes(&self, total: u64, label: &str) -> ProgressBar {
        self.bar(
            total,
            label,
            "{prefix:>8} [{bar:32}] {bytes}/{total_bytes} {bytes_per_sec} eta {eta}",
        )
    }

    /// A bar counting steps.
    #[must_use]
    pub fn steps(&self, total: u64, label: &str) -> ProgressBar {
        self.bar(total, label, "{prefix:>8} [{bar:32}] {pos}/{len} {msg}")
    }

    fn bar(&self, total: u64, label: &str, template: &str) -> ProgressBar {
        if !self.bars {
            return ProgressBar::hidden();
        }
        let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr());
        if let Ok(style) = ProgressStyle::with_template(template) {
            bar.set_style(style.progress_chars("=> "));
        }
        bar.set_prefix(label.to_owned());
        bar
    }

    /// A one-line note on standard error.
    pub fn note(&self, msg: &str) {
        if self.notes {
            eprintln!("{msg}");
        }
    }
}
