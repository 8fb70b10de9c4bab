//! How terminal output is drawn: colour only on a terminal and never with `NO_COLOR`; the
//! width from `COLUMNS` when set, else the terminal's, else no limit (into a pipe or file
//! every column is kept).

use std::io::IsTerminal;

use slackmap::report::terminal::Style;

/// The style of text printed to stdout.
pub fn stdout_style() -> Style {
    let tty = std::io::stdout().is_terminal();
    let no_color = std::env::var_os("NO_COLOR").is_some_and(|v| !v.is_empty());
    let columns = std::env::var("COLUMNS").ok().and_then(|c| c.trim().parse::<usize>().ok());
    let width = columns.filter(|&c| c > 0).or_else(|| {
        if tty {
            terminal_size::terminal_size().map(|(w, _)| w.0 as usize)
        } else {
            None
        }
    });
    Style { color: tty && !no_color, width }
}
