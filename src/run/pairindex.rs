//! Lookup of pairs by (frequency, aggressor, victim) in constant time, for
//! tables and figures that visit every cell of a matrix of many channels
//! (a linear search per cell costs N⁴ on N channels).

use std::collections::HashMap;

/// Pairs indexed by (frequency, aggressor, victim); where a key repeats,
/// the first pair in the list is the one found (as a linear search would).
pub struct PairLookup<'a, T> {
    pairs: &'a [T],
    index: HashMap<(u64, u32, u32), usize>,
}

impl<'a, T> PairLookup<'a, T> {
    /// Index `pairs`, whose (frequency in Hz, aggressor, victim) `key` gives.
    pub fn new(pairs: &'a [T], key: impl Fn(&T) -> (f64, u32, u32)) -> Self {
        let mut index = HashMap::with_capacity(pairs.len());
        for (i, p) in pairs.iter().enumerate().rev() {
            let (f, a, v) = key(p);
            index.insert((f.to_bits(), a, v), i);
        }
        Self { pairs, index }
    }

    /// The pair at (frequency, aggressor, victim), if there is one.
    pub fn get(&self, frequency_hz: f64, aggressor: u32, victim: u32) -> Option<&'a T> {
        let i = *self
            .index
            .get(&(frequency_hz.to_bits(), aggressor, victim))?;
        self.pairs.get(i)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_what_a_linear_search_finds() {
        let mut keys: Vec<(f64, u32, u32)> = Vec::new();
        for f in [100.0, 1000.0] {
            for a in 1..=5 {
                for v in 1..=5 {
                    if a != v {
                        keys.push((f, a, v));
                    }
                }
            }
        }
        keys.push((1000.0, 2, 3)); // a repeat: the first one is found
        let lookup = PairLookup::new(&keys, |k| *k);
        for f in [100.0, 1000.0, 50.0] {
            for a in 0..=6 {
                for v in 0..=6 {
                    let linear = keys.iter().find(|p| **p == (f, a, v));
                    let got = lookup.get(f, a, v);
                    assert_eq!(got.map(|p| p as *const _), linear.map(|p| p as *const _));
                }
            }
        }
    }
}
