//! The seeded split of rows into training, validation and test sets, stratified by class when asked.
//! Each split lists row indices in ascending order.

use serde::{Deserialize, Serialize};
use std::path::Path;

use super::roles::Target;
use crate::error::{Error, Result};
use crate::manifest::SplitSpec;
use crate::rng::{Purpose, Stream};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Splits {
    pub train: Vec<usize>,
    pub validation: Vec<usize>,
    pub test: Vec<usize>,
}

fn cut(mut rows: Vec<usize>, spec: &SplitSpec, stream: &mut Stream, out: &mut Splits) {
    stream.shuffle(&mut rows);
    let n = rows.len() as f64;
    let n_test = (n * spec.test).round() as usize;
    let n_val = ((n * spec.validation).round() as usize).min(rows.len() - n_test);
    out.test.extend_from_slice(&rows[..n_test]);
    out.validation.extend_from_slice(&rows[n_test..n_test + n_val]);
    out.train.extend_from_slice(&rows[n_test + n_val..]);
}

/// Splits rows `0..n` with the stream `(spec.seed, split)`. Stratified: each class is shuffled
/// and cut separately, classes in label order, so every split keeps the class shares.
pub fn split(target: &Target, spec: &SplitSpec, file: &Path) -> Result<Splits> {
    let mut stream = Stream::new(spec.seed, Purpose::Split);
    let mut out = Splits { train: Vec::new(), validation: Vec::new(), test: Vec::new() };
    match target {
        Target::Classes { labels, rows } if spec.stratify => {
            for class in 0..labels.len() {
                let members: Vec<usize> = (0..rows.len()).filter(|&r| rows[r] == class).collect();
                cut(members, spec, &mut stream, &mut out);
            }
        }
        Target::Classes { rows, .. } => cut((0..rows.len()).collect(), spec, &mut stream, &mut out),
        Target::Values(v) => cut((0..v.len()).collect(), spec, &mut stream, &mut out),
    }
    for (name, part) in [("training", &out.train), ("validation", &out.validation), ("test", &out.test)] {
        if part.is_empty() {
            return Err(Error::data(file, None, format!(
                "too few rows for the split: the {name} set would be empty (validation = {}, test = {})",
                spec.validation, spec.test
            )));
        }
    }
    out.train.sort_unstable();
    out.validation.sort_unstable();
    out.test.sort_unstable();
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stratified_split_keeps_class_shares_and_covers_every_row() {
        let rows: Vec<usize> = (0..1000).map(|i| (i % 10 == 0) as usize).collect();
        let target = Target::Classes { labels: vec!["n".into(), "y".into()], rows: rows.clone() };
        let spec = SplitSpec { validation: 0.2, test: 0.1, stratify: true, seed: 4 };
        let s = split(&target, &spec, Path::new("x")).unwrap();
        let positives = |idx: &[usize]| idx.iter().filter(|&&r| rows[r] == 1).count();
        assert_eq!((s.train.len(), s.validation.len(), s.test.len()), (700, 200, 100));
        assert_eq!((positives(&s.train), positives(&s.validation), positives(&s.test)), (70, 20, 10));
        let mut all: Vec<usize> = s.train.iter().chain(&s.validation).chain(&s.test).copied().collect();
        all.sort_unstable();
        assert_eq!(all, (0..1000).collect::<Vec<_>>());
        assert_eq!(s, split(&target, &spec, Path::new("x")).unwrap());
    }
}
