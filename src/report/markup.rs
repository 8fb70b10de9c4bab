//! Small pieces shared by the SVG and HTML renderers: escaping, number formatting for axes,
//! and the verdict marks, so that a mark means the same in every picture and table.

use std::fmt::Write;

use super::Verdict;

/// Escapes text for XML and HTML, in element content and in quoted attributes alike.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            // Control characters are not allowed in XML 1.0; ids never need them.
            c if (c as u32) < 0x20 && !matches!(c, '\n' | '\t' | '\r') => out.push('\u{fffd}'),
            c => out.push(c),
        }
    }
    out
}

/// The smallest of 1, 1.5, 2, 2.5, 3, 4, 5, 6, 8 times a power of ten that is at least `x`
/// (1 for x <= 0 or not finite): the top of a legend scale, fine-grained so the largest value
/// uses most of the scale.
pub fn nice_ceil(x: f64) -> f64 {
    nice_from(x, &[1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0])
}

/// The smallest 1, 2, 2.5 or 5 times a power of ten that is at least `x`: a tick step.
pub fn nice_step(x: f64) -> f64 {
    nice_from(x, &[1.0, 2.0, 2.5, 5.0, 10.0])
}

fn nice_from(x: f64, mantissas: &[f64]) -> f64 {
    if !x.is_finite() || x <= 0.0 {
        return 1.0;
    }
    let p = 10f64.powf(x.log10().floor());
    mantissas.iter().map(|m| m * p).find(|v| *v >= x * (1.0 - 1e-12)).unwrap_or(10.0 * p)
}

/// Tick values from 0 to `top` (a [`nice_ceil`] value) at a round step, about five of them,
/// with the step.
pub fn ticks(top: f64) -> (Vec<f64>, f64) {
    let step = nice_step(top / 5.0);
    let n = (top / step + 1e-9).floor() as usize;
    ((0..=n).map(|k| k as f64 * step).collect(), step)
}

/// A tick label: as few decimals as tell ticks `step` apart, without trailing zeros.
pub fn tick_label(v: f64, step: f64) -> String {
    let decimals =
        if step > 0.0 && step.is_finite() { (-step.log10().floor()).clamp(0.0, 6.0) } else { 0.0 };
    let s = format!("{:.*}", decimals as usize + 1, v);
    let s = if s.contains('.') { s.trim_end_matches('0').trim_end_matches('.') } else { &s };
    if s == "-0" {
        "0".into()
    } else {
        s.to_string()
    }
}

/// Short coordinate for SVG attributes.
pub fn px(v: f64) -> String {
    if v.is_finite() {
        let s = format!("{v:.1}");
        s.strip_suffix(".0").map(str::to_string).unwrap_or(s)
    } else {
        "0".into()
    }
}

/// A verdict's mark centred at (x, y) with half-size `h`: diamond (recalibrate), ring (watch),
/// cross (confounded), nothing (clean). Drawn black over a white halo so that it reads on
/// every fill of the colour scales.
pub fn verdict_mark(v: Verdict, x: f64, y: f64, h: f64) -> String {
    mark(v, x, y, h, false)
}

/// [`verdict_mark`] with the diamond left open: drawn around a small cell, it frames the
/// cell's colour instead of hiding it.
pub fn verdict_mark_open(v: Verdict, x: f64, y: f64, h: f64) -> String {
    mark(v, x, y, h, true)
}

fn mark(v: Verdict, x: f64, y: f64, h: f64, open: bool) -> String {
    let halo = (h * 0.45).max(1.2);
    let line = (h * 0.22).max(0.6);
    let shape = match v {
        Verdict::Recalibrate => format!(
            "<path d=\"M{} {}L{} {}L{} {}L{} {}Z\"",
            px(x),
            px(y - h),
            px(x + h),
            px(y),
            px(x),
            px(y + h),
            px(x - h),
            px(y)
        ),
        Verdict::Watch => {
            format!("<circle cx=\"{}\" cy=\"{}\" r=\"{}\"", px(x), px(y), px(h * 0.8))
        }
        Verdict::Confounded => {
            let d = h * 0.75;
            format!(
                "<path d=\"M{} {}L{} {}M{} {}L{} {}\"",
                px(x - d),
                px(y - d),
                px(x + d),
                px(y + d),
                px(x - d),
                px(y + d),
                px(x + d),
                px(y - d)
            )
        }
        Verdict::NotTested => {
            let d = h * 0.7;
            format!(
                "<path d=\"M{} {}L{} {}L{} {}L{} {}Z\"",
                px(x - d),
                px(y - d),
                px(x + d),
                px(y - d),
                px(x + d),
                px(y + d),
                px(x - d),
                px(y + d)
            )
        }
        Verdict::Clean => return String::new(),
    };
    let fill = if v == Verdict::Recalibrate && !open { "#000000" } else { "none" };
    let mut s = String::new();
    let _ = write!(
        s,
        "<g class=\"mark mark-{}\" pointer-events=\"none\">{shape} fill=\"none\" stroke=\"#ffffff\" \
         stroke-width=\"{}\" stroke-linejoin=\"round\"/>{shape} fill=\"{fill}\" stroke=\"#000000\" \
         stroke-width=\"{}\" stroke-linejoin=\"round\"/></g>",
        v.word(),
        px(halo + line),
        px(line)
    );
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup_and_quotes() {
        assert_eq!(escape("q<1>&\"'"), "q&lt;1&gt;&amp;&quot;&#39;");
        assert_eq!(escape("q\u{1}"), "q\u{fffd}");
    }

    #[test]
    fn nice_ceil_rounds_up_to_a_nice_number() {
        for (x, want) in [(0.7, 0.8), (1.0, 1.0), (1.3, 1.5), (2.2, 2.5), (3.1, 4.0), (8.5, 10.0)] {
            assert!((nice_ceil(x) - want).abs() < 1e-12, "{x}: {}", nice_ceil(x));
        }
        assert!((nice_ceil(0.013) - 0.015).abs() < 1e-12);
        assert!((nice_step(0.6) - 1.0).abs() < 1e-12);
        assert!((nice_ceil(0.0) - 1.0).abs() < 1e-12);
        assert!((nice_ceil(f64::NAN) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn ticks_are_round_and_end_at_the_top() {
        for top in [1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 0.15, 40.0] {
            let (t, step) = ticks(top);
            assert!((3..=6).contains(&t.len()), "{top}: {t:?}");
            assert!((t[t.len() - 1] - top).abs() < 1e-9 * top, "{top}: {t:?}");
            assert!(t.windows(2).all(|w| (w[1] - w[0] - step).abs() < 1e-9), "{t:?}");
        }
    }

    #[test]
    fn tick_labels_are_short() {
        assert_eq!(tick_label(0.0, 0.5), "0");
        assert_eq!(tick_label(1.5, 0.5), "1.5");
        assert_eq!(tick_label(2.0, 0.5), "2");
        assert_eq!(tick_label(0.75, 0.25), "0.75");
        assert_eq!(tick_label(20.0, 5.0), "20");
    }

    #[test]
    fn marks_differ_by_shape() {
        let shapes: Vec<String> = [Verdict::Recalibrate, Verdict::Watch, Verdict::Confounded]
            .iter()
            .map(|&v| verdict_mark(v, 10.0, 10.0, 4.0))
            .collect();
        assert!(shapes[0].contains("<path") && shapes[0].contains('Z'));
        assert!(shapes[1].contains("<circle"));
        assert!(shapes[2].contains("<path") && !shapes[2].contains('Z'));
        assert!(verdict_mark(Verdict::Clean, 0.0, 0.0, 4.0).is_empty());
    }
}
