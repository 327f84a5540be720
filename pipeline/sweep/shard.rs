//! A deterministic partition of a plan's run list into N shards, so that independent processes
//! (for example the tasks of a SLURM job array) each train a disjoint part of one sweep into the
//! same content-addressed results folder. Run i of the plan belongs to shard i mod N: round robin
//! spreads every configuration, cheap or expensive, evenly over the shards.

use std::fmt;
use std::str::FromStr;

use crate::error::Error;

/// Shard `index` of `count`, 0-based (shard K of N matches `SLURM_ARRAY_TASK_ID` under
/// `--array=0-(N-1)`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub index: usize,
    pub count: usize,
}

impl Shard {
    pub fn new(index: usize, count: usize) -> Result<Self, Error> {
        if count == 0 {
            return Err(Error::Usage("--shard K/N: N must be at least 1".into()));
        }
        if index >= count {
            return Err(Error::Usage(format!("--shard {index}/{count}: K counts from 0 and must be below N (0..={})", count - 1)));
        }
        Ok(Shard { index, count })
    }

    /// Whether the plan's run at position `run_index` belongs to this shard.
    pub fn contains(&self, run_index: usize) -> bool {
        run_index % self.count == self.index
    }

    /// How many of `runs` runs fall in this shard.
    pub fn size(&self, runs: usize) -> usize {
        (0..runs).filter(|&i| self.contains(i)).count()
    }
}

impl fmt::Display for Shard {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

impl FromStr for Shard {
    type Err = Error;

    fn from_str(s: &str) -> Result<Self, Error> {
        let bad = || Error::Usage(format!("--shard `{s}`: expected K/N with whole numbers, e.g. 0/4"));
        let (k, n) = s.split_once('/').ok_or_else(bad)?;
        let k = k.trim().parse().map_err(|_| bad())?;
        let n = n.trim().parse().map_err(|_| bad())?;
        Shard::new(k, n)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_partition_the_run_list() {
        for count in 1..=7 {
            let shards: Vec<Shard> = (0..count).map(|k| Shard::new(k, count).unwrap()).collect();
            for run in 0..50 {
                assert_eq!(shards.iter().filter(|s| s.contains(run)).count(), 1, "run {run} of {count} shards");
            }
            let sizes: Vec<usize> = shards.iter().map(|s| s.size(50)).collect();
            assert_eq!(sizes.iter().sum::<usize>(), 50);
            assert!(sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= 1, "{sizes:?}");
        }
    }

    #[test]
    fn parsing_accepts_k_of_n_and_rejects_the_rest() {
        assert_eq!("2/5".parse::<Shard>().unwrap(), Shard { index: 2, count: 5 });
        assert_eq!(Shard { index: 2, count: 5 }.to_string(), "2/5");
        for bad in ["5/5", "1/0", "x/2", "3", "-1/4", "1/2/3", ""] {
            assert!(bad.parse::<Shard>().is_err(), "{bad}");
        }
    }
}
