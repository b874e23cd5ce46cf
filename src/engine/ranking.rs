//! Ranking, Pareto flags and the verdict (metrics.md, "Ranking"). Speed
//! enters only through speed tiers and paces over paired rounds, never as a
//! raw p50 comparison, so that candidates that differ only by timing noise
//! come out in the same order on every run.

use std::cmp::Ordering;

use uuid::Uuid;

use super::settings::RankBy;
use super::speed::{Pace, Paces};
use crate::report::{Candidate, Verdict};

/// The figure `rank_by` names, oriented so that smaller sorts first
/// (`p50_ms` is ranked by tiers instead).
fn key(c: &Candidate, rank_by: RankBy) -> f64 {
    match rank_by {
        RankBy::Agreement | RankBy::P50Ms => -c.fidelity.agreement,
        RankBy::Kl => c.fidelity.kl,
        RankBy::Top1 => -c
            .accuracy
            .as_ref()
            .map_or(f64::NEG_INFINITY, |a| a.own.top1),
        RankBy::Bytes => c.size.bytes as f64,
    }
}

/// Speed tiers over `members` (indices into `candidates`): sorted by p50
/// (then model id), the first opens tier 0; each next one joins the current
/// tier unless it is slower than the tier's first member. Returns
/// (index, tier) pairs.
fn tiers(candidates: &[Candidate], members: &[usize], paces: &Paces<'_>) -> Vec<(usize, usize)> {
    let mut sorted = members.to_vec();
    sorted.sort_by(|&a, &b| {
        let (ca, cb) = (&candidates[a], &candidates[b]);
        ca.latency
            .own
            .p50_ms
            .total_cmp(&cb.latency.own.p50_ms)
            .then(ca.model.id.cmp(&cb.model.id))
            .then(a.cmp(&b))
    });
    let mut out = Vec::with_capacity(sorted.len());
    let (mut tier, mut leader) = (0, None);
    for ix in sorted {
        match leader {
            Some(l) if paces.of(ix, l) == Pace::Slower => {
                tier += 1;
                leader = Some(ix);
            }
            Some(_) => {}
            None => leader = Some(ix),
        }
        out.push((ix, tier));
    }
    out
}

/// Every candidate's speed tier inside its group: the whole group when
/// ranking by p50, else each set of exactly equal `rank_by` values.
fn tier_of_each(candidates: &[Candidate], rank_by: RankBy, paces: &Paces<'_>) -> Vec<usize> {
    let mut groups: Vec<Vec<usize>> = Vec::new();
    for (i, c) in candidates.iter().enumerate() {
        let same = |g: &Vec<usize>| {
            let other = &candidates[g[0]];
            other.gates.passed == c.gates.passed
                && (rank_by == RankBy::P50Ms
                    || key(other, rank_by).total_cmp(&key(c, rank_by)) == Ordering::Equal)
        };
        match groups.iter_mut().find(|g| same(g)) {
            Some(g) => g.push(i),
            None => groups.push(vec![i]),
        }
    }
    let mut tier = vec![0; candidates.len()];
    for g in &groups {
        for (ix, t) in tiers(candidates, g, paces) {
            tier[ix] = t;
        }
    }
    tier
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

/// Whether candidate b dominates candidate a: at least as good on quality
/// and bytes, not slower, and strictly better on one of the three.
fn dominates(cs: &[Candidate], b: usize, a: usize, rank_by: RankBy, paces: &Paces<'_>) -> bool {
    let (qa, qb) = (quality(&cs[a], rank_by), quality(&cs[b], rank_by));
    let (sa, sb) = (cs[a].size.bytes, cs[b].size.bytes);
    let pace = paces.of(b, a);
    qb >= qa && sb <= sa && pace != Pace::Slower && (qb > qa || sb < sa || pace == Pace::Faster)
}

/// Ranks candidates (given in request order, `rounds[i]` the timed runs of
/// candidates[i]) and flags the Pareto front. Passing every gate comes
/// first; then `rank_by`; exact ties by speed tier, bytes, upload order
/// (model ids are UUID v7) and position in the request. The sort key is a
/// tuple of values fixed before sorting, so the order is a strict weak
/// order whatever the timings.
pub fn rank(
    mut candidates: Vec<Candidate>,
    rounds: &[&[f64]],
    rank_by: RankBy,
    tolerance: f64,
) -> Vec<Candidate> {
    assert_eq!(
        candidates.len(),
        rounds.len(),
        "one row of rounds per candidate"
    );
    let paces = Paces::new(rounds.to_vec(), tolerance);
    let tier = tier_of_each(&candidates, rank_by, &paces);
    let front: Vec<bool> = (0..candidates.len())
        .map(|a| {
            !(0..candidates.len()).any(|b| b != a && dominates(&candidates, b, a, rank_by, &paces))
        })
        .collect();
    for (c, on_front) in candidates.iter_mut().zip(&front) {
        c.pareto_optimal = *on_front;
    }
    let mut order: Vec<usize> = (0..candidates.len()).collect();
    order.sort_by(|&a, &b| {
        let (ca, cb) = (&candidates[a], &candidates[b]);
        let passed = cb.gates.passed.cmp(&ca.gates.passed);
        let by_figure = key(ca, rank_by).total_cmp(&key(cb, rank_by));
        let (first, second) = if rank_by == RankBy::P50Ms {
            (tier[a].cmp(&tier[b]), by_figure)
        } else {
            (by_figure, tier[a].cmp(&tier[b]))
        };
        passed
            .then(first)
            .then(second)
            .then(ca.size.bytes.cmp(&cb.size.bytes))
            .then(ca.model.id.cmp(&cb.model.id))
            .then(a.cmp(&b))
    });
    let mut slots: Vec<Option<Candidate>> = candidates.into_iter().map(Some).collect();
    order
        .into_iter()
        .enumerate()
        .map(|(r, ix)| {
            let mut c = slots[ix].take().expect("each index once");
            c.rank = r as u32 + 1;
            c
        })
        .collect()
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

    /// Timed rounds around `ms` with a small wobble, as a machine's noise gives.
    fn timed(ms: f64, wobble: f64, n: usize) -> Vec<f64> {
        (0..n)
            .map(|i| ms * (1.0 + wobble * (((i * 37) % 11) as f64 / 10.0 - 0.5)))
            .collect()
    }

    fn named(name: &str, agreement: f64, ms: f64, bytes: u64, passed: bool) -> Candidate {
        let mut c = candidate();
        c.model.name = name.into();
        c.model.id = uuid::Uuid::now_v7();
        c.fidelity.agreement = agreement;
        c.latency.own.p50_ms = ms;
        c.size.bytes = bytes;
        c.gates.passed = passed;
        c
    }

    /// Ranks with rounds at each candidate's p50, 1 % wobble, 100 rounds.
    fn ranked(cs: Vec<Candidate>, rank_by: RankBy) -> Vec<Candidate> {
        let rounds: Vec<Vec<f64>> = cs
            .iter()
            .map(|c| timed(c.latency.own.p50_ms, 0.01, 100))
            .collect();
        let refs: Vec<&[f64]> = rounds.iter().map(Vec::as_slice).collect();
        rank(cs, &refs, rank_by, 0.03)
    }

    fn names(cs: &[Candidate]) -> Vec<&str> {
        cs.iter().map(|c| c.model.name.as_str()).collect()
    }

    #[test]
    fn candidates_passing_every_gate_rank_first_then_by_the_chosen_figure() {
        let cs = ranked(
            vec![
                named("best-but-failing", 0.99, 1.0, 10, false),
                named("good", 0.95, 1.0, 10, true),
                named("better", 0.97, 1.0, 10, true),
            ],
            RankBy::Agreement,
        );
        assert_eq!(names(&cs), vec!["better", "good", "best-but-failing"]);
        assert_eq!(cs.iter().map(|c| c.rank).collect::<Vec<_>>(), vec![1, 2, 3]);
        assert_eq!(verdict(&cs), (Verdict::Go, Some(cs[0].model.id)));
    }

    #[test]
    fn exact_ties_break_by_speed_tier_then_bytes_then_upload_order() {
        let cs = ranked(
            vec![
                named("first-uploaded-big", 0.9, 1.0, 20, true),
                named("slow", 0.9, 2.0, 10, true),
                named("small", 0.9, 1.0, 10, true),
                named("later-twin", 0.9, 1.0, 20, true),
            ],
            RankBy::Agreement,
        );
        assert_eq!(
            names(&cs),
            vec!["small", "first-uploaded-big", "later-twin", "slow"]
        );
    }

    #[test]
    fn candidates_apart_by_less_than_the_tolerance_share_a_tier_and_order_by_bytes() {
        // 1 % apart, tolerance 3 %: the slightly slower but smaller one wins.
        let cs = ranked(
            vec![
                named("quick-big", 0.9, 1.00, 20, true),
                named("small", 0.9, 1.01, 10, true),
            ],
            RankBy::Agreement,
        );
        assert_eq!(names(&cs), vec!["small", "quick-big"]);
    }

    #[test]
    fn a_chain_of_equal_neighbours_opens_a_new_tier_only_past_the_tier_leader() {
        // a ~ b and b ~ c, but c is slower than a: tiers {a, b}, {c}. Bytes
        // would put c first if it shared their tier.
        let cs = ranked(
            vec![
                named("c", 0.9, 1.05, 1, true),
                named("a", 0.9, 1.00, 3, true),
                named("b", 0.9, 1.025, 2, true),
            ],
            RankBy::Agreement,
        );
        assert_eq!(names(&cs), vec!["b", "a", "c"]);
    }

    #[test]
    fn ranking_by_p50_forms_tiers_over_the_group_then_orders_by_agreement() {
        let cs = ranked(
            vec![
                named("fast-rough", 0.80, 1.00, 10, true),
                named("fast-faithful", 0.95, 1.01, 10, true),
                named("slow-perfect", 0.99, 3.00, 10, true),
            ],
            RankBy::P50Ms,
        );
        assert_eq!(
            names(&cs),
            vec!["fast-faithful", "fast-rough", "slow-perfect"]
        );
    }

    #[test]
    fn nothing_passing_is_no_go_with_no_recommendation() {
        let cs = ranked(vec![named("a", 0.9, 1.0, 10, false)], RankBy::Kl);
        assert_eq!(verdict(&cs), (Verdict::NoGo, None));
    }

    #[test]
    fn the_pareto_front_holds_the_candidates_nobody_dominates() {
        let cs = ranked(
            vec![
                named("fast", 0.90, 1.0, 10, true),
                named("faithful", 0.97, 3.0, 30, true),
                named("dominated", 0.90, 2.0, 20, true),
                named("equal-to-fast", 0.90, 1.0, 10, true),
                named("noise-slower-than-fast", 0.90, 1.01, 10, true),
            ],
            RankBy::Agreement,
        );
        let front: Vec<(&str, bool)> = cs
            .iter()
            .map(|c| (c.model.name.as_str(), c.pareto_optimal))
            .collect();
        // Equal candidates, and those apart by noise only, do not dominate
        // each other: no strict improvement.
        for (name, on) in front {
            assert_eq!(on, name != "dominated", "{name}");
        }
    }

    /// A deterministic stream of numbers in [0, 1).
    fn lcg(state: &mut u64) -> f64 {
        *state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (*state >> 11) as f64 / (1u64 << 53) as f64
    }

    #[test]
    fn adversarial_timings_never_upset_the_sort() {
        // Rounds that make paces look non-transitive: each candidate faster
        // than the next by about the tolerance, with heavy noise. The sort
        // must neither panic nor depend on the input order.
        let mut state = 7;
        for trial in 0..50 {
            let n = 2 + trial % 7;
            let cs: Vec<Candidate> = (0..n)
                .map(|i| named(&format!("m{i}"), 0.9, 1.0 + 0.03 * i as f64, 10, true))
                .collect();
            let rounds: Vec<Vec<f64>> = (0..n)
                .map(|i| {
                    (0..40)
                        .map(|_| (1.0 + 0.03 * i as f64) * (0.9 + 0.2 * lcg(&mut state)))
                        .collect()
                })
                .collect();
            let refs: Vec<&[f64]> = rounds.iter().map(Vec::as_slice).collect();
            let once = names(&rank(cs.clone(), &refs, RankBy::Agreement, 0.03))
                .into_iter()
                .map(String::from)
                .collect::<Vec<_>>();
            let mut rev_cs = cs.clone();
            rev_cs.reverse();
            let mut rev_refs = refs.clone();
            rev_refs.reverse();
            let again = rank(rev_cs, &rev_refs, RankBy::Agreement, 0.03);
            assert_eq!(once, names(&again), "trial {trial}");
        }
    }

    #[test]
    fn a_rerun_with_rotated_rounds_and_jitter_below_the_tolerance_ranks_alike() {
        // metrics.md, Ranking 6: the same recorded rounds, permuted as the
        // rotation would permute them and jittered by under the tolerance,
        // give the same ranking, Pareto flags, verdict and recommendation.
        let base = vec![
            named("distilled-64", 0.948, 0.050, 18_946, true),
            named("distilled-32", 0.948, 0.049, 9_855, true),
            named("hard-64", 0.893, 0.050, 18_939, false),
            named("tiny-16", 0.940, 0.048, 5_304, true),
        ];
        let rounds: Vec<Vec<f64>> = base
            .iter()
            .map(|c| timed(c.latency.own.p50_ms, 0.02, 100))
            .collect();
        let outcome = |cs: Vec<Candidate>, rounds: &[Vec<f64>]| {
            let refs: Vec<&[f64]> = rounds.iter().map(Vec::as_slice).collect();
            let ranked = rank(cs, &refs, RankBy::Agreement, 0.03);
            let flags: Vec<(String, bool)> = ranked
                .iter()
                .map(|c| (c.model.name.clone(), c.pareto_optimal))
                .collect();
            (flags, verdict(&ranked))
        };
        let first = outcome(base.clone(), &rounds);
        let mut state = 11;
        for shift in 1..20 {
            let rerun: Vec<Vec<f64>> = rounds
                .iter()
                .map(|r| {
                    let mut r = r.clone();
                    r.rotate_left(shift);
                    r.iter()
                        .map(|ms| ms * (1.0 + 0.005 * (lcg(&mut state) - 0.5)))
                        .collect()
                })
                .collect();
            let mut cs = base.clone();
            for (c, r) in cs.iter_mut().zip(&rerun) {
                let mut sorted = r.clone();
                sorted.sort_by(f64::total_cmp);
                c.latency.own.p50_ms = crate::engine::stats::nearest_rank(&sorted, 50);
            }
            assert_eq!(outcome(cs, &rerun), first, "rerun {shift}");
        }
    }
}
