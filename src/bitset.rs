//! Sets of small integers kept as bits in `u64` words: one bit per member, so a set over n
//! values takes n/8 bytes and a union is n/64 word operations. Used where a graph is dense
//! (conflicts between scheduling units, pattern packing).

/// True when `v` is in the set.
pub(crate) fn bit(set: &[u64], v: usize) -> bool {
    set[v / 64] >> (v % 64) & 1 == 1
}

/// Adds `v` (its word must exist).
pub(crate) fn set_bit(set: &mut [u64], v: usize) {
    set[v / 64] |= 1 << (v % 64);
}

/// Removes `v` (its word must exist).
pub(crate) fn clear_bit(set: &mut [u64], v: usize) {
    set[v / 64] &= !(1 << (v % 64));
}

/// The number of members.
pub(crate) fn count(set: &[u64]) -> usize {
    set.iter().map(|w| w.count_ones() as usize).sum()
}

/// The members, in increasing order.
pub(crate) fn members(set: &[u64]) -> impl Iterator<Item = usize> + '_ {
    set.iter().enumerate().flat_map(|(i, &w)| {
        let mut w = w;
        std::iter::from_fn(move || {
            (w != 0).then(|| {
                let b = w.trailing_zeros() as usize;
                w &= w - 1;
                i * 64 + b
            })
        })
    })
}
