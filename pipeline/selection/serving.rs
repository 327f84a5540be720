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
        self.networks().for_each(ScoringModel::keep_rows_on_this_thread);
        self
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
