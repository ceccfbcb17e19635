//! Deterministic partition of a batch's flights into shards for a cluster scheduler.
//!
//! The rule: sort the flight ids (byte order), number them 0, 1, 2, …; shard `I` of `N`
//! (`--shard I/N`, `I` counted from 0 like a Slurm array task id) takes every flight whose
//! number `k` has `k mod N == I` (round robin). Every flight lands in exactly one shard,
//! shard sizes differ by at most one, and the partition depends only on the ids, not on
//! the order of the manifest.

use crate::error::{Error, Result};

/// One shard: index `index` of `count`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shard {
    pub index: usize,
    pub count: usize,
}

impl Shard {
    /// The whole batch as one shard.
    pub const ALL: Shard = Shard { index: 0, count: 1 };

    /// Parse `I/N` with 0 ≤ I < N.
    pub fn parse(text: &str) -> Result<Shard> {
        let fix = "write --shard I/N with I from 0 to N−1, e.g. --shard 0/4 (with Slurm: --shard \"$SLURM_ARRAY_TASK_ID/$SLURM_ARRAY_TASK_COUNT\")";
        let (i, n) = text
            .split_once('/')
            .ok_or_else(|| Error::usage(format!("--shard {text:?} is not I/N")).with_fix(fix))?;
        let index: usize = i.trim().parse().map_err(|_| {
            Error::usage(format!("--shard {text:?}: {i:?} is not a whole number")).with_fix(fix)
        })?;
        let count: usize = n.trim().parse().map_err(|_| {
            Error::usage(format!("--shard {text:?}: {n:?} is not a whole number")).with_fix(fix)
        })?;
        if count == 0 || index >= count {
            return Err(Error::usage(format!(
                "--shard {text:?}: the shard index must lie in 0..{count}"
            ))
            .with_fix(fix));
        }
        Ok(Shard { index, count })
    }

    /// Whether this is the whole batch.
    pub fn is_all(&self) -> bool {
        self.count == 1
    }

    /// The ids of `ids` this shard takes, in sorted order.
    pub fn select<'a>(&self, ids: impl IntoIterator<Item = &'a str>) -> Vec<&'a str> {
        let mut sorted: Vec<&str> = ids.into_iter().collect();
        sorted.sort_unstable();
        sorted.dedup();
        sorted
            .into_iter()
            .enumerate()
            .filter(|(k, _)| k % self.count == self.index)
            .map(|(_, id)| id)
            .collect()
    }
}

impl std::fmt::Display for Shard {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parse_accepts_and_refuses() {
        assert_eq!(Shard::parse("0/2").unwrap(), Shard { index: 0, count: 2 });
        assert_eq!(
            Shard::parse(" 3 / 4 ").unwrap(),
            Shard { index: 3, count: 4 }
        );
        for bad in ["2/2", "0/0", "a/2", "1", "-1/2", "1/2/3"] {
            let e = Shard::parse(bad).unwrap_err();
            assert!(e.to_string().contains("--shard"), "{bad}: {e}");
            assert_eq!(e.exit_code(), 2);
        }
    }

    #[test]
    fn shards_cover_every_flight_exactly_once() {
        let ids: Vec<String> = (0..23)
            .map(|i| format!("flight-{:02}", (i * 7) % 23))
            .collect();
        for count in 1..=8 {
            let mut seen: Vec<&str> = Vec::new();
            let mut sizes = Vec::new();
            for index in 0..count {
                let part = Shard { index, count }.select(ids.iter().map(String::as_str));
                sizes.push(part.len());
                seen.extend(part);
            }
            seen.sort_unstable();
            let mut want: Vec<&str> = ids.iter().map(String::as_str).collect();
            want.sort_unstable();
            assert_eq!(seen, want, "{count} shards");
            let (lo, hi) = (sizes.iter().min().unwrap(), sizes.iter().max().unwrap());
            assert!(hi - lo <= 1, "{count} shards: sizes {sizes:?}");
        }
    }

    #[test]
    fn partition_ignores_manifest_order() {
        let a = Shard { index: 1, count: 3 }.select(["c", "a", "e", "b", "d"]);
        let b = Shard { index: 1, count: 3 }.select(["e", "d", "c", "b", "a"]);
        // Sorted a b c d e → numbers 0..4; shard 1 of 3 takes numbers 1 and 4 (hand-worked).
        assert_eq!(a, vec!["b", "e"]);
        assert_eq!(a, b);
    }
}
