//! The scatter of quality against p50 latency, from a report: candidates,
//! and the teacher and baseline as reference points.

use maud::Markup;

use crate::engine::settings::RankBy;
use crate::report::Report;
use crate::web::charts::{Point, Reference, Role, Scatter, scatter};

pub(super) fn scatter_of(r: &Report) -> Markup {
    let by_top1 = r.settings.rank_by == RankBy::Top1;
    let quality = if by_top1 { "top-1" } else { "agreement" };
    let points: Vec<Point> = r
        .candidates
        .iter()
        .map(|c| Point {
            name: c.model.name.clone(),
            p50_ms: c.latency.own.p50_ms,
            p50_ci_ms: c.latency.own.p50_ci_ms,
            quality: if by_top1 {
                c.accuracy.as_ref().map_or(0.0, |a| a.own.top1)
            } else {
                c.fidelity.agreement
            },
            bytes: c.size.bytes,
            front: c.pareto_optimal,
        })
        .collect();
    // The teacher agrees with itself on every sample; by top-1 it has its own.
    let teacher_quality = if by_top1 {
        r.teacher.accuracy.as_ref().map(|a| a.top1)
    } else {
        Some(1.0)
    };
    let mut references: Vec<Reference> = Vec::new();
    if let Some(q) = teacher_quality {
        references.push(Reference {
            role: Role::Teacher,
            name: r.teacher.model.name.clone(),
            p50_ms: r.teacher.latency.p50_ms,
            p50_ci_ms: r.teacher.latency.p50_ci_ms,
            quality: q,
        });
    }
    if let Some(b) = &r.baseline {
        let q = if by_top1 {
            b.accuracy.as_ref().map(|a| a.own.top1)
        } else {
            Some(b.fidelity.agreement)
        };
        if let Some(q) = q {
            references.push(Reference {
                role: Role::Baseline,
                name: b.model.name.clone(),
                p50_ms: b.latency.own.p50_ms,
                p50_ci_ms: b.latency.own.p50_ci_ms,
                quality: q,
            });
        }
    }
    let summary = format!(
        "{quality} against p50 latency for {} candidates, with the teacher (square) and the baseline \
         (diamond) for reference; whiskers are 95 % intervals of p50; marker area by file size; the \
         dashed line joins the Pareto front",
        points.len()
    );
    scatter(&Scatter {
        points: &points,
        references: &references,
        quality,
        summary: &summary,
    })
}
