//! Principal reasons: from a row's per-feature attributions (integrated gradients on the
//! log-odds), the features that moved it most toward the outcome that goes against the person
//! (a binary model with `[decision] favourable` declared; without one, toward the positive
//! class), toward the explained class (multiclass), or most in either direction (regression,
//! signed), at most N of them and only those that moved it that way. US Regulation B
//! (12 CFR 1002.9(b)(2) and its official comment 9(b)(2)-1) asks for the specific principal
//! reasons, usually no more than four.

/// Reasons a scored row gets by default.
pub(crate) const DEFAULT_REASONS: usize = 4;

/// Which way a contribution must point to count as a reason.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Toward {
    /// Contributions of this sign (+1 toward the positive or explained class, -1 away from it).
    Sign(f64),
    /// The largest contributions by size, either sign (regression).
    EitherWay,
}

impl Toward {
    /// The direction for a model: `labels` its class labels, `favourable` the declared one.
    pub(crate) fn of(task: crate::manifest::Task, labels: &[String], favourable: Option<&String>) -> Self {
        match task {
            crate::manifest::Task::Binary => match favourable {
                Some(f) if labels.get(1) == Some(f) => Toward::Sign(-1.0),
                _ => Toward::Sign(1.0),
            },
            crate::manifest::Task::Multiclass => Toward::Sign(1.0),
            crate::manifest::Task::Regression => Toward::EitherWay,
        }
    }

    /// In words, for reports and the card.
    pub(crate) fn describe(self, task: crate::manifest::Task, labels: &[String], favourable: Option<&String>) -> String {
        match (self, task) {
            (Toward::EitherWay, _) => "the features that moved the prediction most, either way".into(),
            (_, crate::manifest::Task::Multiclass) => "the features that moved the row most toward the class predicted".into(),
            (Toward::Sign(s), _) => {
                let toward = if s > 0.0 { labels.get(1) } else { labels.first() };
                let toward = toward.map(String::as_str).unwrap_or("?");
                match favourable {
                    Some(_) => format!("the features that moved the row most toward \"{toward}\", the outcome not favourable to the person"),
                    None => format!(
                        "the features that moved the row most toward \"{toward}\", the positive class (no favourable outcome is declared in [decision])"
                    ),
                }
            }
        }
    }
}

/// At most `n` (feature index, contribution) pairs of `row`, largest first in the direction
/// `toward`; ties keep feature order.
pub(crate) fn principal(row: &[f64], toward: Toward, n: usize) -> Vec<(usize, f64)> {
    let key = |c: f64| match toward {
        Toward::Sign(s) => s * c,
        Toward::EitherWay => c.abs(),
    };
    let mut order: Vec<usize> = (0..row.len()).filter(|&f| key(row[f]) > 0.0).collect();
    order.sort_by(|&a, &b| key(row[b]).total_cmp(&key(row[a])).then(a.cmp(&b)));
    order.into_iter().take(n).map(|f| (f, row[f])).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reasons_point_the_declared_way_and_stop_at_n() {
        let row = [0.5, -2.0, 1.5, 0.0, -0.1];
        assert_eq!(principal(&row, Toward::Sign(1.0), 4), vec![(2, 1.5), (0, 0.5)]);
        assert_eq!(principal(&row, Toward::Sign(-1.0), 1), vec![(1, -2.0)]);
        assert_eq!(principal(&row, Toward::EitherWay, 3), vec![(1, -2.0), (2, 1.5), (0, 0.5)]);
        let labels = ["no".to_string(), "yes".to_string()];
        assert_eq!(Toward::of(crate::manifest::Task::Binary, &labels, Some(&"no".into())), Toward::Sign(1.0));
        assert_eq!(Toward::of(crate::manifest::Task::Binary, &labels, Some(&"yes".into())), Toward::Sign(-1.0));
    }
}
