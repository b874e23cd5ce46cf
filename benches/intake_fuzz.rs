//! The long intake fuzzing run: the properties of tests/support/mutate.rs
//! over many more cases than the unit run, printing what it ran and found.
//! `cargo bench --bench intake_fuzz [-- SETS MODELS]` (cases per seed file).

#[allow(dead_code, unreachable_pub)]
#[path = "../tests/support/mutate.rs"]
mod mutate;

fn main() {
    let mut args = std::env::args().skip(1).filter(|a| a != "--bench");
    let sets: u32 = args.next().and_then(|a| a.parse().ok()).unwrap_or(5000);
    let models: u32 = args.next().and_then(|a| a.parse().ok()).unwrap_or(300);
    let started = std::time::Instant::now();
    let mut failures = 0;
    for (what, outcome) in [
        ("evaluation sets", mutate::sets(sets, 0x1_0ee7)),
        ("models", mutate::models(models, 0x2_0ee7)),
    ] {
        match outcome {
            Ok(t) => println!(
                "{what}: {} cases, {} accepted, {} refused, 0 failures",
                t.cases, t.accepted, t.refused
            ),
            Err(why) => {
                failures += 1;
                println!("{what}: FAILED: {why}");
            }
        }
    }
    println!(
        "{failures} failing properties, {:.0} s",
        started.elapsed().as_secs_f64()
    );
    if failures > 0 {
        std::process::exit(1);
    }
}
