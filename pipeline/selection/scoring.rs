//! A stored model ready to score rows: its configuration, head, preprocessor and weights, loaded
//! from a run folder, and with the calibration map fitted for it, what is deployed.

use candle_core::DType;

use crate::calibrate::CalibrationMap;
use crate::data::prep::{Matrix, Preprocessor};
use crate::error::Result;
use crate::nn::engine::{Engine, EVAL_BLOCK};
use crate::nn::mlp::Mlp;
use crate::rng::{Purpose, Stream};
use crate::store::run::StoredRun;
use crate::training::{Head, TargetScaling};

#[derive(Clone)]
pub(crate) struct ScoringModel {
    pub head: Head,
    pub preprocessor: Preprocessor,
    pub scaling: Option<TargetScaling>,
    /// The stored values in the engine that computed them, so scores equal training-time outputs.
    engine: Engine<f32>,
}

impl ScoringModel {
    pub(crate) fn from_stored(run: &StoredRun) -> Result<Self> {
        let config = run.config()?;
        let preprocessor = run.preprocessor()?;
        let head = run.record.head;
        // The initial values are overwritten by the stored tensors; the stream only fills shapes.
        let mut network = Mlp::new(&config.model, preprocessor.width(), head.outputs(), &mut Stream::new(0, Purpose::Init), DType::F32)?;
        network.load(&run.checked_tensors()?)?;
        let engine = Engine::from_model(&network, EVAL_BLOCK)?;
        Ok(ScoringModel { head, preprocessor, scaling: run.record.target_scaling, engine })
    }

    /// A model of `spec` with `inputs` inputs and initial weights from `seed`, for tests.
    #[cfg(test)]
    pub(crate) fn for_tests(spec: &crate::manifest::ModelSpec, inputs: usize, head: Head, seed: u64) -> Self {
        let network = Mlp::new(spec, inputs, head.outputs(), &mut Stream::new(seed, Purpose::Init), DType::F32).expect("a model");
        let preprocessor = Preprocessor { inputs: Vec::new(), output_names: Vec::new() };
        ScoringModel { head, preprocessor, scaling: None, engine: Engine::from_model(&network, EVAL_BLOCK).expect("an engine") }
    }

    /// This model with every evaluation kept on the calling thread
    /// ([`Engine::keep_rows_on_this_thread`]), for a caller that spreads whole evaluations across
    /// the pool's threads itself. Speed only, never the bits.
    pub(crate) fn on_this_thread(mut self) -> Self {
        self.engine.keep_rows_on_this_thread();
        self
    }

    /// The network's raw outputs (logits, or the standardised prediction) for every row of `x`.
    pub(crate) fn raw(&mut self, x: &Matrix) -> Vec<f32> {
        crate::numerics::prepare_process();
        self.engine.evaluate(x)
    }

    /// Probabilities through `map` when one is given, else the head's class probabilities (k per
    /// row) or predictions, for every row of `x`.
    pub(crate) fn score_calibrated(&mut self, x: &Matrix, map: Option<&CalibrationMap>) -> Result<Vec<f64>> {
        let raw = self.raw(x);
        Ok(self.deployed_outputs(&raw, map))
    }

    /// What [`ScoringModel::score_calibrated`] gives for rows whose raw outputs are `raw`:
    /// through `map` when one is given, else the head's predictions.
    pub(crate) fn deployed_outputs(&self, raw: &[f32], map: Option<&CalibrationMap>) -> Vec<f64> {
        match map {
            Some(map) => map.apply(&raw.iter().map(|&z| f64::from(z)).collect::<Vec<_>>(), self.head.classes),
            None => self.head.predictions(raw, self.scaling),
        }
    }
}

impl ScoringModel {
    /// Evaluation-mode raw outputs and input gradients of every row of `x`, the gradient of the
    /// outputs weighted by `seed(row, outputs, weights)` per row ([`Engine::input_gradients`]).
    pub(crate) fn input_gradients(&mut self, x: &Matrix, seed: &crate::nn::engine::OutputWeights<'_, f32>) -> (Vec<f32>, Vec<f32>) {
        crate::numerics::prepare_process();
        self.engine.input_gradients(x, seed)
    }
}
