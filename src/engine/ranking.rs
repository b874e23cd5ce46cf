//! Ranking, Pareto flags and the verdict (metrics.md, "Ranking").

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
/// bytes, then upload order (model ids are UUID v7 and sort by upload time).
/// The sort is stable, so position in the request breaks any tie left.
pub fn rank(candidates: &mut [Candidate], rank_by: RankBy) {
    candidates.sort_by(|a, b| {
        b.gates
            .passed
            .cmp(&a.gates.passed)
            .then(key(a, rank_by).total_cmp(&key(b, rank_by)))
            .then(a.latency.own.p50_ms.total_cmp(&b.latency.own.p50_ms))
            .then(a.size.bytes.cmp(&b.size.bytes))
            .then(a.model.id.cmp(&b.model.id))
    });
    for (i, c) in candidates.iter_mut().enumerate() {
        c.rank = i as u32 + 1;
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::gates::tests::candidate;

    fn named(name: &str, agreement: f64, p50: f64, bytes: u64, passed: bool) -> Candidate {
        let mut c = candidate();
        c.model.name = name.into();
        c.model.id = uuid::Uuid::now_v7();
        c.fidelity.agreement = agreement;
        c.latency.own.p50_ms = p50;
        c.size.bytes = bytes;
        c.gates.passed = passed;
        c
    }

    fn names(cs: &[Candidate]) -> Vec<&str> {
        cs.iter().map(|c| c.model.name.as_str()).collect()
    }

    #[test]
    fn candidates_passing_every_gate_rank_first_then_by_the_chosen_figure() {
        let mut cs = vec![
            named("best-but-failing", 0.99, 1.0, 10, false),
            named("good", 0.95, 1.0, 10, true),
            named("better", 0.97, 1.0, 10, true),
        ];
        rank(&mut cs, RankBy::Agreement);
        assert_eq!(names(&cs), vec!["better", "good", "best-but-failing"]);
        assert_eq!(cs.iter().map(|c| c.rank).collect::<Vec<_>>(), vec![1, 2, 3]);
        assert_eq!(verdict(&cs), (Verdict::Go, Some(cs[0].model.id)));
    }

    #[test]
    fn ties_break_by_p50_then_bytes_then_upload_order() {
        let mut cs = vec![
            named("first-uploaded-big", 0.9, 1.0, 20, true),
            named("slow", 0.9, 2.0, 10, true),
            named("small", 0.9, 1.0, 10, true),
            named("later-twin", 0.9, 1.0, 20, true),
        ];
        rank(&mut cs, RankBy::Agreement);
        assert_eq!(
            names(&cs),
            vec!["small", "first-uploaded-big", "later-twin", "slow"]
        );
    }

    #[test]
    fn nothing_passing_is_no_go_with_no_recommendation() {
        let mut cs = vec![named("a", 0.9, 1.0, 10, false)];
        rank(&mut cs, RankBy::Kl);
        assert_eq!(verdict(&cs), (Verdict::NoGo, None));
    }

    #[test]
    fn the_pareto_front_holds_the_candidates_nobody_dominates() {
        let mut cs = vec![
            named("fast", 0.90, 1.0, 10, true),
            named("faithful", 0.97, 3.0, 30, true),
            named("dominated", 0.90, 2.0, 20, true),
            named("equal-to-fast", 0.90, 1.0, 10, true),
        ];
        mark_pareto(&mut cs, RankBy::Agreement);
        let front: Vec<bool> = cs.iter().map(|c| c.pareto_optimal).collect();
        // Equal candidates do not dominate each other: no strict improvement.
        assert_eq!(front, vec![true, true, false, true]);
    }
}
