//! The depth profile of one directed pair, for the report's drill-down: observed against
//! predicted probability of the victim's likeliest outcome, by depth class, in the victim's
//! rows with and without the aggressor active. Crosstalk shows as the observed value falling
//! below the crosstalk-free prediction in the rows with the aggressor active, more so as the
//! sequences grow; the rows without it show how well the model fits otherwise.

use std::collections::BTreeMap;

use super::Analysis;
use crate::layout::QubitIx;
use crate::report::DepthPoint;

/// Half-octave depth class of a timed-layer count, round(2 log2 L), as the permutation
/// strata use (DEVELOPERS.md, "Permutation strata").
fn depth_class(timed_layers: u32) -> i32 {
    (2.0 * (timed_layers.max(1) as f64).log2()).round() as i32
}

/// Shot-weighted sums of one class: shots x (layers, observed, predicted), shots, rows.
#[derive(Default)]
struct Sums {
    layers: f64,
    observed: f64,
    predicted: f64,
    shots: f64,
    rows: usize,
}

/// The profile of `victim <- aggressor`, rows with the aggressor idle first, each part by
/// increasing depth class.
pub(crate) fn depth_profile(a: &Analysis, victim: QubitIx, aggressor: QubitIx) -> Vec<DepthPoint> {
    let kinds = &a.rows.kinds;
    let mut classes: BTreeMap<(bool, i32), Sums> = BTreeMap::new();
    for &i in &a.used {
        let row = &a.rows.rows[i];
        let Some(j) = row.block.iter().position(|&q| q == victim) else { continue };
        let (Some(m), Some(p)) = (&row.marginal, a.predictions.get(i)) else { continue };
        let shots: u64 = m.iter().sum();
        if shots == 0 || p.len() != m.len() {
            continue;
        }
        let active = row
            .context_counts
            .iter()
            .any(|&((k, r), c)| r == aggressor && c > 0 && kinds.get(k).qubits().contains(&victim));
        let bit = |idx: usize| idx >> j & 1 == 1;
        let p1_obs = m.iter().enumerate().filter(|(x, _)| bit(*x)).map(|(_, &c)| c).sum::<u64>()
            as f64
            / shots as f64;
        let p1_pred: f64 = p.iter().enumerate().filter(|(x, _)| bit(*x)).map(|(_, &v)| v).sum();
        let (obs, pred) =
            if p1_pred >= 0.5 { (p1_obs, p1_pred) } else { (1.0 - p1_obs, 1.0 - p1_pred) };
        let w = shots as f64;
        let s = classes.entry((active, depth_class(row.n_timed_layers))).or_default();
        s.layers += w * row.n_timed_layers as f64;
        s.observed += w * obs;
        s.predicted += w * pred;
        s.shots += w;
        s.rows += 1;
    }
    classes
        .into_iter()
        .map(|((active, _), s)| DepthPoint {
            timed_layers: s.layers / s.shots,
            aggressor_active: active,
            rows: s.rows,
            observed: s.observed / s.shots,
            predicted: s.predicted / s.shots,
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn depth_classes_are_half_octaves() {
        // round(2 log2 L): 1 -> 0, 2 -> 2, 3 -> 3 (3.17), 4 -> 4, 6 -> 5 (5.17), 8 -> 6.
        let got: Vec<i32> = [0, 1, 2, 3, 4, 6, 8].iter().map(|&l| depth_class(l)).collect();
        assert_eq!(got, vec![0, 0, 2, 3, 4, 5, 6]);
    }
}
