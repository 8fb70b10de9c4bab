//! Progress bars on stderr (indicatif), shown only on a terminal and never with --quiet.

use std::io::IsTerminal;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// A progress display for the library's [`slackmap::audit::Progress`] reports.
pub struct Bar {
    bar: Option<ProgressBar>,
}

impl Bar {
    /// A bar on stderr, or nothing when stderr is not a terminal or `quiet` is set.
    pub fn new(quiet: bool) -> Bar {
        if quiet || !std::io::stderr().is_terminal() {
            return Bar { bar: None };
        }
        let bar = ProgressBar::with_draw_target(Some(0), ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template("{msg:28} [{bar:40}] {pos}/{len} ({eta})")
                .unwrap_or_else(|_| ProgressStyle::default_bar())
                .progress_chars("=> "),
        );
        Bar { bar: Some(bar) }
    }

    /// Clears the bar.
    pub fn finish(&self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
    }
}

impl slackmap::audit::Progress for Bar {
    fn stage(&self, name: &str, total: u64) {
        if let Some(b) = &self.bar {
            b.set_message(name.to_string());
            b.set_length(total);
            b.set_position(0);
        }
    }

    fn advance(&self, n: u64) {
        if let Some(b) = &self.bar {
            b.inc(n);
        }
    }
}
