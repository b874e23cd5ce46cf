//! Putting a report together from the figures of each stage: sizes,
//! latency summaries, the baseline comparison, gates, ranking, Pareto flags
//! and the verdict.

use time::OffsetDateTime;

use super::environment::Environment;
use super::gates::{Evidence, judge};
use super::job::{Job, ModelRef};
use super::latency;
use super::metrics::baseline::VersusLogits;
use super::ranking::{rank, verdict};
use super::scoring::{Figures, StudentFigures};
use super::setup::{Prepared, Setup};
use super::speed::{CONFIDENCE_95, paired_median};
use crate::report::{
    BaselineEntry, Candidate, DatasetSummary, FlipCounts, ModelSummary, Report, ReportSettings,
    Size, TeacherEntry, TeacherSize, VersusBaseline,
};

fn summary(m: &ModelRef, prepared: &Prepared) -> ModelSummary {
    ModelSummary {
        id: m.id,
        name: m.name.clone(),
        sha256: m.sha256.clone(),
        notes: prepared.model.info.notes.clone(),
    }
}

/// A student's size against the teacher's.
fn size(m: &ModelRef, prepared: &Prepared, teacher: &TeacherSize) -> Size {
    let parameters = prepared.model.info.parameters;
    Size {
        bytes: m.bytes,
        parameters,
        macs: prepared.model.macs_per_sample(&prepared.binding.dims),
        size_ratio: m.bytes as f64 / teacher.bytes as f64,
        parameter_ratio: (teacher.parameters > 0)
            .then(|| parameters as f64 / teacher.parameters as f64),
    }
}

fn versus(
    v: VersusLogits,
    rounds: &[f64],
    baseline_rounds: &[f64],
    size_ratio: f64,
) -> VersusBaseline {
    let (speedup, speedup_ci) = paired_median(baseline_rounds, rounds, CONFIDENCE_95);
    VersusBaseline {
        agreement: v.agreement,
        agreement_delta: v.agreement_delta,
        agreement_delta_ci: v.agreement_delta_ci,
        teacher_flip_rate: v.teacher_flip_rate,
        top1_delta: v.top1_delta,
        top1_delta_ci: v.top1_delta_ci,
        mcnemar_p: v.mcnemar_p,
        negative_flip_rate: v.negative_flip_rate,
        speedup,
        speedup_ci,
        size_ratio,
        counts: FlipCounts {
            gained_agreement: v.gained_agreement,
            lost_agreement: v.lost_agreement,
            gained_top1: v.gained_top1,
            lost_top1: v.lost_top1,
        },
    }
}

/// `per_entry` holds the timed runs of the teacher, the baseline if any,
/// then each student in request order.
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
    let (baseline_rounds, student_rounds) = match setup.baseline {
        Some(_) => (Some(per_entry[1].as_slice()), &per_entry[2..]),
        None => (None, &per_entry[1..]),
    };
    let teacher_latency = latency::summarize(teacher_rounds, throughput(setup.teacher));
    let baseline = job
        .baseline
        .as_ref()
        .zip(setup.baseline)
        .zip(figures.baseline)
        .zip(baseline_rounds)
        .map(
            |(((b, ix), f), rounds): (((&ModelRef, usize), StudentFigures), &[f64])| {
                BaselineEntry {
                    model: summary(b, &setup.models[ix]),
                    output: setup.models[ix].output_name.clone(),
                    output_kind: f.kind,
                    fidelity: f.fidelity,
                    accuracy: f.accuracy,
                    size: size(b, &setup.models[ix], &teacher_size),
                    latency: latency::summarize_against(rounds, teacher_rounds, throughput(ix)),
                    slices: f.slices,
                }
            },
        );
    let candidates: Vec<Candidate> = job
        .students
        .iter()
        .zip(&setup.students)
        .zip(figures.students)
        .zip(student_rounds)
        .map(|(((student, &ix), (f, versus_logits)), ms)| {
            let m = &setup.models[ix];
            let mut c = Candidate {
                rank: 0,
                model: summary(student, m),
                output: m.output_name.clone(),
                output_kind: f.kind,
                fidelity: f.fidelity,
                accuracy: f.accuracy,
                size: size(student, m, &teacher_size),
                latency: latency::summarize_against(ms, teacher_rounds, throughput(ix)),
                slices: f.slices,
                versus_baseline: versus_logits
                    .zip(baseline_rounds)
                    .zip(job.baseline.as_ref())
                    .map(|((v, b_rounds), b)| {
                        versus(v, ms, b_rounds, student.bytes as f64 / b.bytes as f64)
                    }),
                pareto_optimal: false,
                gates: Default::default(),
            };
            let evidence = Evidence {
                samples: n,
                rounds: ms,
                teacher_rounds,
                baseline_rounds,
            };
            c.gates = judge(&s.gates, &c, &evidence);
            c
        })
        .collect();
    let rounds: Vec<&[f64]> = student_rounds.iter().map(Vec::as_slice).collect();
    let candidates = rank(candidates, &rounds, s.rank_by, s.latency.tolerance);
    let (verdict, recommended) = verdict(&candidates);
    Report {
        evaluation: job.evaluation,
        project: job.project.clone(),
        created_at: job.created_at,
        finished_at: OffsetDateTime::now_utc(),
        environment: Environment {
            worker: job.worker.clone(),
            ..Environment::current(bulk_threads, timed_kernels(setup))
        },
        settings: ReportSettings {
            temperature: s.temperature,
            alpha: s.alpha,
            batch_size: s.batch_size,
            latency: s.latency,
            rank_by: s.rank_by,
            gates: s.gates.clone(),
            output: s.output.clone(),
            baseline: job.baseline.as_ref().map(|b| b.id),
            runs_on: s.runs_on.clone(),
        },
        dataset: DatasetSummary {
            id: job.dataset.id,
            name: job.dataset.name.clone(),
            samples: n,
            has_labels: setup.set.labels().is_some(),
            class_names: setup.set.class_names().map(<[String]>::to_vec),
        },
        teacher: TeacherEntry {
            model: summary(&job.teacher, teacher_model),
            output: teacher_model.output_name.clone(),
            output_kind: figures.teacher_kind,
            accuracy: figures.teacher_accuracy,
            size: teacher_size,
            latency: teacher_latency,
        },
        baseline,
        candidates,
        timings: Default::default(),
        verdict,
        recommended,
    }
}

/// The matrix-multiply kernels of every model's batch-1 plan, the plans
/// the timed rounds ran.
fn timed_kernels(setup: &Setup) -> Vec<String> {
    let mut names: Vec<String> = setup
        .models
        .iter()
        .filter_map(|m| m.plan(1).ok())
        .flat_map(|p| p.matmul_kernels())
        .collect();
    names.sort();
    names.dedup();
    names
}
