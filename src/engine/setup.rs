//! Loading an evaluation's models once each and fitting them to the set:
//! every check the records allow is repeated here on the loaded models,
//! which are the authority (a record may leave a shape undecided).

use std::collections::HashMap;
use std::sync::Mutex;

use super::dataset::EvalSet;
use super::error::{EngineError, EngineResult};
use super::fit::{Binding, agree, bind};
use super::job::{Job, ModelRef};
use super::model::{BatchAxis, Model, Plan};
use super::settings::Context;

/// A model made ready for one evaluation: bound to the set, with its plans
/// built once per batch size and reused.
#[derive(Debug)]
pub struct Prepared {
    /// "teacher", "baseline" or "student", for messages; a model listed
    /// twice takes its first role.
    pub role: &'static str,
    pub label: String,
    pub model: Model,
    pub binding: Binding,
    pub output: usize,
    pub output_name: String,
    pub classes: usize,
    plans: Mutex<HashMap<usize, Plan>>,
}

impl Prepared {
    /// Binds a loaded model to the set and picks its scored output.
    pub fn new(
        role: &'static str,
        label: String,
        model: Model,
        set: &EvalSet,
        requested_output: Option<&str>,
    ) -> EngineResult<Self> {
        let binding = bind(&model.info, &set.info().arrays, &label)?;
        let scored = model.scored_output(requested_output, &binding.dims, &label)?;
        Ok(Prepared {
            role,
            output_name: model.info.outputs[scored.index].name.clone(),
            label,
            model,
            binding,
            output: scored.index,
            classes: scored.classes,
            plans: Mutex::new(HashMap::new()),
        })
    }

    /// The batch size this model runs at in the bulk pass.
    pub fn bulk_batch(&self, requested: usize, samples: usize) -> usize {
        match self.model.batch {
            BatchAxis::Fixed(b) => b,
            BatchAxis::Symbolic(_) => requested.min(samples),
        }
    }

    pub fn plan(&self, batch: usize) -> EngineResult<Plan> {
        let mut plans = self.plans.lock().unwrap_or_else(|p| p.into_inner());
        if let Some(p) = plans.get(&batch) {
            return Ok(p.clone());
        }
        let plan = self
            .model
            .plan(batch, &self.binding.dims, self.output)
            .map_err(|e| EngineError::InvalidModel(format!("model '{}': {e}", self.label)))?;
        plans.insert(batch, plan.clone());
        Ok(plan)
    }
}

/// The models of an evaluation, loaded once per distinct file and bound to the set.
pub struct Setup {
    pub set: EvalSet,
    pub models: Vec<Prepared>,
    pub teacher: usize,
    pub baseline: Option<usize>,
    pub students: Vec<usize>,
}

fn labelled(name: &str, e: EngineError) -> EngineError {
    match e {
        EngineError::InvalidModel(m) if !m.contains(name) => {
            EngineError::InvalidModel(format!("model '{name}': {m}"))
        }
        other => other,
    }
}

/// Loads every distinct model once, fits it to the set, and checks what
/// must hold before running: settings, a scored output per model, one class
/// count for all, labels inside it.
pub fn prepare(job: &Job) -> EngineResult<Setup> {
    let set = EvalSet::open(&job.dataset.path)?;
    job.settings.validate(Context {
        labels: set.labels().is_some(),
        slices: set.slices().is_some(),
        baseline: job.baseline.is_some(),
    })?;
    let mut by_sha: HashMap<(String, Option<String>), usize> = HashMap::new();
    let mut models: Vec<Prepared> = Vec::new();
    let mut index = |m: &ModelRef, role, models: &mut Vec<Prepared>| -> EngineResult<usize> {
        let output = job.output_of(m).map(str::to_string);
        let key = (m.sha256.clone(), output.clone());
        if let Some(&ix) = by_sha.get(&key) {
            return Ok(ix);
        }
        let model = Model::load(&m.path).map_err(|e| labelled(&m.name, e))?;
        models.push(Prepared::new(
            role,
            m.name.clone(),
            model,
            &set,
            output.as_deref(),
        )?);
        by_sha.insert(key, models.len() - 1);
        Ok(models.len() - 1)
    };
    let teacher = index(&job.teacher, "teacher", &mut models)?;
    let baseline = job
        .baseline
        .as_ref()
        .map(|b| index(b, "baseline", &mut models))
        .transpose()?;
    let students = job
        .students
        .iter()
        .map(|s| index(s, "student", &mut models))
        .collect::<EngineResult<Vec<_>>>()?;
    let mut classes = None;
    agree(&mut classes, models[teacher].classes, &job.teacher.name)?;
    if let (Some(ix), Some(b)) = (baseline, &job.baseline) {
        agree(&mut classes, models[ix].classes, &b.name)?;
    }
    for (&ix, s) in students.iter().zip(&job.students) {
        agree(&mut classes, models[ix].classes, &s.name)?;
    }
    let info = set.info();
    super::fit::check_labels(info.largest_label, models[teacher].classes)?;
    super::fit::check_class_names(info.class_names.as_deref(), models[teacher].classes)?;
    Ok(Setup {
        set,
        models,
        teacher,
        baseline,
        students,
    })
}
