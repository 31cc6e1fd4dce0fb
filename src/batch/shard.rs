//! Shards: which blocks of data rows one machine scores when a large file is split across
//! several.
//!
//! Data rows are numbered from 1 (the header is not a data row) and cut into consecutive blocks
//! of `block_rows` rows. Shard `I/N` takes blocks `I, I + N, I + 2N, …` (0-based), so the `N`
//! shards together take every row exactly once, each in its original order, and the shards stay
//! balanced without anyone knowing the file's length in advance:
//!
//! ```text
//! block(row) = ⌊(row − 1) / block_rows⌋        row is in shard I/N  ⇔  block(row) mod N = I
//! ```
//!
//! This module only decides membership; it reads nothing.

use std::fmt;
use std::str::FromStr;

/// One shard of `count`: blocks whose number modulo `count` equals `index`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    index: u64,
    count: u64,
}

/// A shard that is not of the form `I/N` with `0 ≤ I < N`.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("'{text}' is not a shard: {problem} (write I/N with 0 ≤ I < N, for example 0/4)")]
pub struct BadShard {
    /// The text given.
    pub text: String,
    /// What is wrong with it.
    pub problem: &'static str,
}

impl Shard {
    /// The whole input: shard `0/1`.
    pub const ALL: Shard = Shard { index: 0, count: 1 };

    /// Shard `index/count`; `None` unless `index < count`.
    pub fn new(index: u64, count: u64) -> Option<Shard> {
        (index < count).then_some(Shard { index, count })
    }

    /// The 0-based shard index `I`.
    pub fn index(self) -> u64 {
        self.index
    }

    /// The number of shards `N`.
    pub fn count(self) -> u64 {
        self.count
    }

    /// Whether the 1-based data row `row` belongs to this shard, for blocks of `block_rows`
    /// rows (`block_rows` ≥ 1).
    #[inline]
    pub fn contains(self, row: u64, block_rows: u64) -> bool {
        self.count == 1 || ((row - 1) / block_rows.max(1)) % self.count == self.index
    }
}

impl Default for Shard {
    fn default() -> Self {
        Shard::ALL
    }
}

impl fmt::Display for Shard {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

impl FromStr for Shard {
    type Err = BadShard;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let bad = |problem| BadShard {
            text: text.to_string(),
            problem,
        };
        let (index, count) = text.trim().split_once('/').ok_or_else(|| bad("no '/'"))?;
        let index: u64 = index
            .trim()
            .parse()
            .map_err(|_| bad("I is not a whole number"))?;
        let count: u64 = count
            .trim()
            .parse()
            .map_err(|_| bad("N is not a whole number"))?;
        if count == 0 {
            return Err(bad("N must be at least 1"));
        }
        Shard::new(index, count).ok_or_else(|| bad("I must be less than N"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_and_refuses() {
        assert_eq!("2/5".parse::<Shard>(), Ok(Shard::new(2, 5).unwrap()));
        assert_eq!(" 0 / 1 ".parse::<Shard>(), Ok(Shard::ALL));
        for bad in ["5/5", "1/0", "a/2", "3", "-1/2", "1/2/3"] {
            assert!(bad.parse::<Shard>().is_err(), "{bad}");
        }
    }

    #[test]
    fn shards_partition_the_rows() {
        let (count, block_rows) = (3, 4);
        for row in 1..=100 {
            let owners = (0..count)
                .filter(|&i| Shard::new(i, count).unwrap().contains(row, block_rows))
                .count();
            assert_eq!(owners, 1, "row {row}");
        }
        let first = Shard::new(0, count).unwrap();
        assert!((1..=4).all(|r| first.contains(r, block_rows)));
        assert!(!first.contains(5, block_rows));
        assert!(first.contains(13, block_rows));
    }
}
