//! Ranking, Pareto flags and the verdict (metrics.md, "Ranking").

use std::cmp::Ordering;

use uuid::Uuid;

use super::settings::RankBy;
use crate::report::{Candidate, Verdict};

/// The figure `rank_by` names, oriented so that smaller sorts first.
fn key(c: &Candidate, rank_by: RankBy) -> f64 {
    match rank_by {
        RankBy::Agreement => -c.fidelity.agreement,
        RankBy::Kl => c.fidelity.kl,
        RankBy::Top1 => -c
            .accuracy
            .as_ref()
            .map_or(f64::NEG_INFINITY, |a| a.own.top1),
        RankBy::P50Ms => c.latency.own.p50_ms,
        RankBy::Bytes => c.size.bytes as f64,
    }
}

/// Orders candidates in place and numbers their ranks from 1: those passing
/// every gate first; inside each group by `rank_by`; ties by p50_ms, then
/// bytes, then upload order (model ids are UUID v7 and sort by upload time),
/// then position in the request.
pub fn rank(candidates: &mut [Candidate], rank_by: RankBy) {
    let order = |a: &(usize, &Candidate), b: &(usize, &Candidate)| -> Ordering {
        let (ia, a) = *a;
        let (ib, b) = *b;
        b.gates
            .passed
            .cmp(&a.gates.passed)
            .then(key(a, rank_by).total_cmp(&key(b, rank_by)))
            .then(a.latency.own.p50_ms.total_cmp(&b.latency.own.p50_ms))
            .then(a.size.bytes.cmp(&b.size.bytes))
            .then(a.model.id.cmp(&b.model.id))
            .then(ia.cmp(&ib))
    };
    let mut indexed: Vec<(usize, &Candidate)> = candidates.iter().enumerate().collect();
    indexed.sort_by(order);
    let permutation: Vec<usize> = indexed.into_iter().map(|(i, _)| i).collect();
    let sorted: Vec<Candidate> = permutation.iter().map(|&i| candidates[i].clone()).collect();
    for (slot, (rank, mut c)) in candidates.iter_mut().zip(sorted.into_iter().enumerate()) {
        c.rank = rank as u32 + 1;
        *slot = c;
    }
}

/// Quality for dominance: top1 when ranking by top1, else agreement.
fn quality(c: &Candidate, rank_by: RankBy) -> f64 {
    match rank_by {
        RankBy::Top1 => c
            .accuracy
            .as_ref()
            .map_or(f64::NEG_INFINITY, |a| a.own.top1),
        _ => c.fidelity.agreement,
    }
}

/// B dominates A when it is at least as good on quality, p50_ms and bytes,
/// and strictly better on at least one.
fn dominates(b: &Candidate, a: &Candidate, rank_by: RankBy) -> bool {
    let (qa, qb) = (quality(a, rank_by), quality(b, rank_by));
    let (la, lb) = (a.latency.own.p50_ms, b.latency.own.p50_ms);
    let (sa, sb) = (a.size.bytes, b.size.bytes);
    qb >= qa && lb <= la && sb <= sa && (qb > qa || lb < la || sb < sa)
}

pub fn mark_pareto(candidates: &mut [Candidate], rank_by: RankBy) {
    let flags: Vec<bool> = candidates
        .iter()
        .map(|a| !candidates.iter().any(|b| dominates(b, a, rank_by)))
        .collect();
    for (c, f) in candidates.iter_mut().zip(flags) {
        c.pareto_optimal = f;
    }
}

/// `go` when at least one candidate passes every gate; the recommended one is
/// then the first of the ranking.
pub fn verdict(ranked: &[Candidate]) -> (Verdict, Option<Uuid>) {
    match ranked.first() {
        Some(first) if first.gates.passed => (Verdict::Go, Some(first.model.id)),
        _ => (Verdict::NoGo, None),
    }
}
