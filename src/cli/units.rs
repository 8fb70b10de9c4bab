//! Values in the report's units on the command line. A crosstalk level is TVD per layer: a
//! plain number is raw TVD (`0.001`, `1e-3`); a number followed by `m` is in the unit every
//! table shows, 1e-3 TVD per layer (`1m` = 0.001, `0.5m` = 0.0005).

/// The largest TVD per layer accepted: beyond it a layer would move more than half of all
/// probability, which no calibration question is about (and a value there almost always
/// means the display unit was typed as raw TVD).
pub const MAX_TVD_PER_LAYER: f64 = 0.5;

/// Parses a TVD per layer as documented in the module header.
pub fn tvd_per_layer(s: &str) -> Result<f64, String> {
    let t = s.trim();
    let (number, scale) = match t.strip_suffix('m') {
        Some(n) => (n.trim(), 1e-3),
        None => (t, 1.0),
    };
    let v: f64 = number.parse().map_err(|_| {
        format!("'{s}' is not a TVD per layer: give raw TVD (0.001 or 1e-3) or 1e-3 units with suffix m (1m)")
    })?;
    let v = v * scale;
    if !v.is_finite() || v < 0.0 {
        return Err(format!("'{s}' is not a TVD per layer: it must be a number from 0 to 0.5"));
    }
    if v > MAX_TVD_PER_LAYER {
        return Err(format!(
            "{s} TVD per layer is above {MAX_TVD_PER_LAYER}, the most a layer can meaningfully move. \
             The tables show 1e-3 units: for {s} x1e-3 write {s}m (= {}) or {}",
            v * 1e-3,
            raw(v * 1e-3)
        ));
    }
    Ok(v)
}

/// A raw TVD as the shortest text that reads back to it, in e-notation below 0.01.
pub fn raw(v: f64) -> String {
    if v != 0.0 && v.abs() < 1e-2 {
        format!("{v:e}")
    } else {
        v.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn raw_and_display_units_agree() {
        assert_eq!(tvd_per_layer("1e-3"), Ok(1e-3));
        assert_eq!(tvd_per_layer("0.001"), Ok(1e-3));
        assert!((tvd_per_layer("1m").unwrap() - 1e-3).abs() < 1e-18);
        assert!((tvd_per_layer(" 0.25m ").unwrap() - 2.5e-4).abs() < 1e-18);
        assert_eq!(tvd_per_layer("0"), Ok(0.0));
        assert_eq!(tvd_per_layer("0.5"), Ok(0.5));
    }

    #[test]
    fn impossible_values_are_refused_with_the_hint() {
        let e = tvd_per_layer("1").unwrap_err();
        assert!(e.contains("1m") && e.contains("1e-3"), "{e}");
        assert!(tvd_per_layer("-1e-3").is_err());
        assert!(tvd_per_layer("nan").is_err());
        assert!(tvd_per_layer("inf").is_err());
        assert!(tvd_per_layer("1 permille").is_err());
        assert!(tvd_per_layer("600m").is_err());
    }
}
