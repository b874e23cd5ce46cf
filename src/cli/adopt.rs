//! `proctor adopt`: makes a candidate that passed every gate of a succeeded
//! evaluation its project's baseline, so that later evaluations can be
//! judged against it with `--baseline current`. By default it adopts the
//! recommended candidate.

use uuid::Uuid;

use super::client::Client;
use super::exit::{EXIT_GO, Exit};
use crate::service::SetBaseline;
use crate::store::Status;

#[derive(Debug, Clone, clap::Args)]
#[command(
    after_help = "Exit codes: 0 adopted, 2 usage or input error (the evaluation has not \
                  succeeded, or the model did not pass every gate), 3 server or network error."
)]
pub struct AdoptArgs {
    #[command(flatten)]
    pub server: super::connection::ServerArgs,
    /// The succeeded evaluation the candidate passed in.
    #[arg(value_name = "EVALUATION_ID")]
    pub evaluation: Uuid,
    /// The candidate to adopt; by default the evaluation's recommended one.
    #[arg(long, value_name = "MODEL_ID")]
    pub model: Option<Uuid>,
}

fn input(message: String) -> Exit {
    Exit::input(message)
}

pub async fn run(args: &AdoptArgs) -> Result<i32, Exit> {
    let client = Client::new(&args.server, None)?;
    let e = client.evaluation(args.evaluation).await?;
    if e.status != Status::Succeeded {
        return Err(input(format!(
            "evaluation {} is {}; only a succeeded evaluation's candidates can be adopted",
            e.id,
            e.status.as_str()
        )));
    }
    let model = match args.model.or(e.recommended) {
        Some(m) => m,
        None => {
            return Err(input(format!(
                "evaluation {} recommends no candidate (its verdict is no-go); name one with --model",
                e.id
            )));
        }
    };
    let project = client
        .set_baseline(
            &e.project,
            &SetBaseline {
                model,
                evaluation: Some(e.id),
            },
        )
        .await?;
    let name = project
        .summary
        .baseline
        .as_ref()
        .map_or_else(|| model.to_string(), |b| b.model.name.clone());
    println!(
        "project '{}' now judges candidates against {name} ({model}), from evaluation {}",
        project.summary.name, e.id
    );
    Ok(EXIT_GO)
}
