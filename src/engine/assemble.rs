//! Putting a report together from the figures of each stage: sizes,
//! latency summaries, gates, ranking, Pareto flags and the verdict.

use time::OffsetDateTime;

use super::environment::Environment;
use super::gates::{Evidence, judge};
use super::job::{Job, ModelRef};
use super::latency;
use super::logits::OutputKind;
use super::metrics::accuracy::{Accuracy, StudentAccuracy};
use super::metrics::fidelity::Fidelity;
use super::ranking::{rank, verdict};
use super::setup::Setup;
use crate::report::{
    Candidate, DatasetSummary, ModelSummary, Report, ReportSettings, Size, TeacherEntry,
    TeacherSize,
};

/// The scoring stage's figures: the teacher's, then each student's in
/// request order.
pub struct Figures {
    pub teacher_kind: OutputKind,
    pub teacher_accuracy: Option<Accuracy>,
    pub students: Vec<(OutputKind, Fidelity, Option<StudentAccuracy>)>,
}

fn summary(m: &ModelRef) -> ModelSummary {
    ModelSummary {
        id: m.id,
        name: m.name.clone(),
        sha256: m.sha256.clone(),
    }
}

/// `per_entry` holds the timed runs of the teacher, then of each student.
pub fn assemble(
    job: &Job,
    setup: &Setup,
    figures: Figures,
    per_entry: &[Vec<f64>],
    throughput: impl Fn(usize) -> f64,
    bulk_threads: usize,
) -> Report {
    let s = &job.settings;
    let n = setup.set.samples() as u64;
    let teacher_model = &setup.models[setup.teacher];
    let teacher_size = TeacherSize {
        bytes: job.teacher.bytes,
        parameters: teacher_model.model.info.parameters,
        macs: teacher_model
            .model
            .macs_per_sample(&teacher_model.binding.dims),
    };
    let teacher_rounds = &per_entry[0];
    let teacher_latency = latency::summarize(teacher_rounds, throughput(setup.teacher));
    let candidates: Vec<Candidate> = job
        .students
        .iter()
        .zip(&setup.students)
        .zip(figures.students)
        .zip(&per_entry[1..])
        .map(|(((student, &ix), (kind, fid, acc)), ms)| {
            let m = &setup.models[ix];
            let parameters = m.model.info.parameters;
            let mut c = Candidate {
                rank: 0,
                model: summary(student),
                output: m.output_name.clone(),
                output_kind: kind,
                fidelity: fid,
                accuracy: acc,
                size: Size {
                    bytes: student.bytes,
                    parameters,
                    macs: m.model.macs_per_sample(&m.binding.dims),
                    size_ratio: student.bytes as f64 / job.teacher.bytes as f64,
                    parameter_ratio: (teacher_size.parameters > 0)
                        .then(|| parameters as f64 / teacher_size.parameters as f64),
                },
                latency: latency::summarize_against(ms, teacher_rounds, throughput(ix)),
                pareto_optimal: false,
                gates: Default::default(),
            };
            let evidence = Evidence {
                samples: n,
                rounds: ms,
                teacher_rounds,
            };
            c.gates = judge(&s.gates, &c, &evidence);
            c
        })
        .collect();
    let rounds: Vec<&[f64]> = per_entry[1..].iter().map(Vec::as_slice).collect();
    let candidates = rank(candidates, &rounds, s.rank_by, s.latency.tolerance);
    let (verdict, recommended) = verdict(&candidates);
    Report {
        evaluation: job.evaluation,
        project: job.project.clone(),
        created_at: job.created_at,
        finished_at: OffsetDateTime::now_utc(),
        environment: Environment::current(bulk_threads),
        settings: ReportSettings {
            temperature: s.temperature,
            alpha: s.alpha,
            batch_size: s.batch_size,
            latency: s.latency,
            rank_by: s.rank_by,
            gates: s.gates.clone(),
            output: s.output.clone(),
        },
        dataset: DatasetSummary {
            id: job.dataset.id,
            name: job.dataset.name.clone(),
            samples: n,
            has_labels: setup.set.labels().is_some(),
        },
        teacher: TeacherEntry {
            model: summary(&job.teacher),
            output: teacher_model.output_name.clone(),
            output_kind: figures.teacher_kind,
            accuracy: figures.teacher_accuracy,
            size: teacher_size,
            latency: teacher_latency,
        },
        candidates,
        timings: Default::default(),
        verdict,
        recommended,
    }
}
