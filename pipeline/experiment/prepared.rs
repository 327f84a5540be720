//! An experiment made ready to train or to retrain: its plan, and the training and validation
//! matrices every run shares read-only, encoded by the preprocessor the experiment fitted on the
//! training rows and built straight from the data file a column at a time (the second pass).

use crate::data::prep::Matrix;
use crate::error::Result;
use crate::experiment::plan::{self, Plan};
use crate::experiment::Experiment;
use crate::training::{Labels, RunData};

pub struct Prepared {
    pub exp: Experiment,
    pub plan: Plan,
    pub train_x: Matrix,
    pub validation_x: Matrix,
    pub train_y: Labels,
    pub validation_y: Labels,
}

impl Prepared {
    pub fn new(exp: Experiment) -> Result<Self> {
        let naming = exp.run_naming();
        Self::with_naming(exp, &naming)
    }

    /// With the plan's run ids derived as recorded (verification under another tool version, or of
    /// an older layout, keeps the stored run ids).
    pub fn with_naming(exp: Experiment, naming: &plan::RunNaming) -> Result<Self> {
        let plan = plan::build(&exp.manifest, naming)?;
        let mut matrices = exp.preprocessor.transform_source(&exp.source, &[&exp.splits.train, &exp.splits.validation])?.into_iter();
        let (Some((train_x, _)), Some((validation_x, _))) = (matrices.next(), matrices.next()) else {
            return Err(crate::error::Error::Internal("two row lists gave fewer than two matrices".into()));
        };
        let train_y = exp.labels(&exp.splits.train);
        let validation_y = exp.labels(&exp.splits.validation);
        Ok(Prepared { exp, plan, train_x, validation_x, train_y, validation_y })
    }

    pub fn run_data(&self) -> RunData<'_> {
        RunData { train_x: &self.train_x, train_y: &self.train_y, validation_x: &self.validation_x, validation_y: &self.validation_y }
    }
}
