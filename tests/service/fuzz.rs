//! The intake under mutated files (a bounded, seeded run; the long run is
//! `cargo bench --bench intake_fuzz`): every property is in
//! tests/support/mutate.rs.

use crate::mutate;

#[test]
fn mutated_evaluation_sets_are_read_or_refused_never_a_panic() {
    let tally = mutate::sets(64, 0x5e7_f00d).unwrap_or_else(|why| panic!("{why}"));
    assert_eq!(tally.cases, 64 * mutate::set_seeds().len() as u64);
    assert!(tally.refused > 0, "the edits reach the checks: {tally:?}");
}

#[test]
fn mutated_models_are_accepted_or_refused_as_input_never_a_service_fault() {
    let tally = mutate::models(12, 0x0_77a5).unwrap_or_else(|why| panic!("{why}"));
    assert_eq!(tally.cases, 12 * mutate::model_seeds().len() as u64);
    assert!(tally.refused > 0, "the edits reach the checks: {tally:?}");
}
