//! The deployed model as one scorer: the selected run through its calibration map, or a seed
//! ensemble's members each through its own, averaged as `derive` averages them. The analyses
//! score through it, so what they measure is what `predict` deploys.

use crate::calibrate::CalibrationMap;
use crate::data::prep::Matrix;
use crate::error::Result;
use crate::selection::scoring::ScoringModel;
use crate::store::run::StoredRun;
use crate::training::Head;

/// The deployed model: the selected run through its calibration map, or a seed ensemble's members
/// each through its own, averaged as `derive` averages them, so its outputs on the test rows are
/// the stored test predictions bit for bit.
#[derive(Clone)]
pub(crate) struct Deployed {
    members: Vec<(ScoringModel, Option<CalibrationMap>)>,
}

impl Deployed {
    pub(crate) fn load(selection: &crate::selection::Selection, runs: &[StoredRun]) -> Result<Self> {
        let find = |id: &str| {
            runs.iter()
                .find(|r| r.record.run_id == id)
                .ok_or_else(|| crate::error::Error::Internal(format!("the deployed run {id} is not among the runs read")))
        };
        let members = match &selection.ensemble {
            Some(e) => e
                .members
                .iter()
                .enumerate()
                .map(|(i, id)| Ok((ScoringModel::from_stored(find(id)?)?, e.maps.get(i).cloned())))
                .collect::<Result<_>>()?,
            None => {
                vec![(ScoringModel::from_stored(find(&selection.selected_run)?)?, selection.calibration.as_ref().map(|c| c.map.clone()))]
            }
        };
        Ok(Deployed { members })
    }

    /// The training target's standard deviation (regression), the unit of the prediction's scaling.
    pub(crate) fn target_std(&self) -> Option<f64> {
        self.members[0].0.scaling.map(|s| s.std)
    }

    /// Each member's network (one for a single run), without its calibration map.
    pub(crate) fn networks(&mut self) -> impl Iterator<Item = &mut ScoringModel> {
        self.members.iter_mut().map(|(m, _)| m)
    }

    pub(crate) fn head(&self) -> Head {
        self.members[0].0.head
    }

    /// This model with every evaluation kept on the calling thread, for a caller that spreads
    /// whole evaluations across the pool's threads itself. Speed only, never the bits.
    pub(crate) fn on_this_thread(mut self) -> Self {
        self.members = self.members.into_iter().map(|(model, map)| (model.on_this_thread(), map)).collect();
        self
    }

    /// The deployed outputs of `moved`, a copy of rows whose outputs `unmoved` holds (as
    /// [`Deployed::score`] gave them, k per row) with only the rows `changed` (increasing) set to
    /// other inputs: only those rows are scored, and every other row keeps its outputs. A row's
    /// outputs depend on that row's inputs alone, so the bits are those of scoring every row;
    /// when nearly every row changed, every row is scored.
    pub(crate) fn score_changed(&mut self, moved: &Matrix, changed: &[usize], unmoved: &[f64]) -> Result<Vec<f64>> {
        if changed.len() * 10 >= moved.rows * 9 {
            return self.score(moved);
        }
        let k = self.head().values_per_row();
        let scored = self.score(&moved.rows_at(changed))?;
        let mut outputs = unmoved.to_vec();
        for (&r, values) in changed.iter().zip(scored.chunks_exact(k)) {
            outputs[r * k..(r + 1) * k].copy_from_slice(values);
        }
        Ok(outputs)
    }

    /// The deployed outputs for every row of `x`.
    pub(crate) fn score(&mut self, x: &Matrix) -> Result<Vec<f64>> {
        if self.members.len() == 1 {
            let (model, map) = &mut self.members[0];
            return model.score_calibrated(x, map.as_ref());
        }
        let scored: Vec<Vec<f64>> = self.members.iter_mut().map(|(m, map)| m.score_calibrated(x, map.as_ref())).collect::<Result<_>>()?;
        Ok(crate::selection::deployed::mean_outputs(&scored.iter().map(Vec::as_slice).collect::<Vec<_>>()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scoring_only_the_changed_rows_gives_the_bits_of_scoring_them_all() {
        let spec = crate::manifest::ModelSpec { hidden: vec![12, 12], ..Default::default() };
        let head =
            Head { task: crate::manifest::Task::Multiclass, classes: 3, loss: crate::manifest::RegressionLoss::Mse, huber_delta: 1.0 };
        let mut model = Deployed { members: vec![(ScoringModel::for_tests(&spec, 4, head, 5), None)] };
        // More rows than one evaluation block, so changed rows land at other places in the blocks.
        let x = Matrix { rows: 700, cols: 4, data: (0..2800).map(|i| ((i * 29 % 97) as f32 / 97.0 - 0.5) * 4.0).collect() };
        let unmoved = model.score(&x).expect("scores");
        for every in [3, 1] {
            let mut moved = x.clone();
            let changed: Vec<usize> = (0..x.rows).filter(|r| r % every == 0).collect();
            for &r in &changed {
                moved.data[r * 4 + 2] += 0.75;
            }
            let whole = model.score(&moved).expect("scores");
            let part = model.score_changed(&moved, &changed, &unmoved).expect("scores");
            assert_eq!(
                part.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                whole.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                "every {every}"
            );
        }
    }
}
