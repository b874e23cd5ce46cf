//! The scoring stage: every model's scores become logits, then the figures
//! of metrics.md — the teacher's accuracy, each student's fidelity and
//! accuracy against the teacher, their slices, and each candidate against
//! the baseline.

use super::bulk::BulkScores;
use super::job::{Hooks, Job, Stage};
use super::logits::{Logits, OutputKind, OutputKindChoice, to_logits};
use super::metrics::accuracy::{
    Accuracy, StudentAccuracy, StudentInputs, accuracy, student_accuracy,
};
use super::metrics::baseline::{Inputs, VersusLogits, versus_baseline};
use super::metrics::fidelity::{Fidelity, fidelity};
use super::metrics::slices::{SliceFigures, slice_figures};
use super::setup::Setup;

/// A student's figures against the teacher (the baseline has the same).
pub struct StudentFigures {
    pub kind: OutputKind,
    pub fidelity: Fidelity,
    pub accuracy: Option<StudentAccuracy>,
    pub slices: Option<Vec<SliceFigures>>,
}

/// Everything the scoring stage found, the students in request order.
pub struct Figures {
    pub teacher_kind: OutputKind,
    pub teacher_accuracy: Option<Accuracy>,
    pub baseline: Option<StudentFigures>,
    pub students: Vec<(StudentFigures, Option<VersusLogits>)>,
}

pub fn score(job: &Job, setup: &Setup, results: &[BulkScores], hooks: &Hooks<'_>) -> Figures {
    let s = &job.settings;
    let total = setup.students.len() as u64;
    (hooks.progress)(Stage::Scoring, 0, total);
    let convert = |ix: usize, choice: OutputKindChoice| to_logits(results[ix].raw.clone(), choice);
    let (teacher, teacher_kind) = convert(setup.teacher, s.output_kind.teacher);
    let labels = setup.set.labels();
    let teacher_accuracy = labels.map(|y| accuracy(&teacher, y));
    let student = |logits: &Logits, kind: OutputKind| {
        let fid = fidelity(&teacher, logits, s.temperature);
        let acc = labels.zip(teacher_accuracy.as_ref()).map(|(y, ta)| {
            student_accuracy(&StudentInputs {
                teacher: &teacher,
                teacher_accuracy: ta,
                student: logits,
                labels: y,
                temperature: s.temperature,
                alpha: s.alpha,
                soft_cross_entropy: fid.soft_cross_entropy,
            })
        });
        StudentFigures {
            kind,
            slices: setup
                .set
                .slices()
                .map(|sl| slice_figures(&teacher, logits, labels, sl)),
            fidelity: fid,
            accuracy: acc,
        }
    };
    let baseline = setup.baseline.map(|ix| {
        let (logits, kind) = convert(ix, s.output_kind.students);
        let figures = student(&logits, kind);
        (logits, figures)
    });
    let students = setup
        .students
        .iter()
        .enumerate()
        .map(|(done, &ix)| {
            let (logits, kind) = convert(ix, s.output_kind.students);
            let figures = student(&logits, kind);
            let versus = baseline.as_ref().map(|(b_logits, b)| {
                versus_baseline(&Inputs {
                    teacher: &teacher,
                    baseline: b_logits,
                    candidate: &logits,
                    labels,
                    agreement_candidate: figures.fidelity.agreement,
                    agreement_baseline: b.fidelity.agreement,
                    top1_candidate: figures.accuracy.as_ref().map(|a| a.own.top1),
                    top1_baseline: b.accuracy.as_ref().map(|a| a.own.top1),
                })
            });
            (hooks.progress)(Stage::Scoring, done as u64 + 1, total);
            (figures, versus)
        })
        .collect();
    Figures {
        teacher_kind,
        teacher_accuracy,
        baseline: baseline.map(|(_, f)| f),
        students,
    }
}
