//! `proctor token create|list|revoke`: access tokens, made on the machine
//! that holds the service's database rather than over HTTP, so that no
//! request can mint one (api.md, "Access"). The secret is printed once and
//! stored only as its SHA-256.

use time::OffsetDateTime;
use uuid::Uuid;

use super::exit::{EXIT_GO, Exit};
use crate::config::DataArgs;
use crate::service::limits;
use crate::store::{EVERY_PROJECT, Role, Store, TokenRecord};

#[derive(Debug, Clone, clap::Args)]
pub struct TokenCommand {
    #[command(subcommand)]
    pub action: TokenAction,
    #[command(flatten)]
    pub data: DataArgs,
}

#[derive(Debug, Clone, clap::Subcommand)]
pub enum TokenAction {
    /// Make a token and print its secret (shown this once only).
    Create {
        /// A name saying who holds it, e.g. `ci-seed-grading`; it is what
        /// evaluations record as `created_by`.
        name: String,
        /// reader (every GET), submitter (uploads, creating and canceling
        /// evaluations), maintainer (baselines, deleting uploads) or admin.
        #[arg(long, value_parser = parse_role)]
        role: Role,
        /// The project it acts in, or `*` for every project.
        #[arg(long)]
        project: String,
    },
    /// List tokens (never their secrets).
    List,
    /// Revoke a token by name; it is refused from the next request on.
    Revoke { name: String },
}

fn rfc3339(t: OffsetDateTime) -> String {
    t.format(&time::format_description::well_known::Rfc3339)
        .unwrap_or_default()
}

fn parse_role(s: &str) -> Result<Role, String> {
    Role::parse(s).ok_or_else(|| {
        let names: Vec<_> = Role::ALL.iter().map(|r| r.as_str()).collect();
        format!("unknown role '{s}'; one of {}", names.join(", "))
    })
}

/// 32 bytes from the operating system's generator, as hex.
fn new_secret() -> Result<String, Exit> {
    let mut bytes = [0u8; 32];
    getrandom::fill(&mut bytes)
        .map_err(|e| Exit::server(format!("no random bytes from the system: {e}")))?;
    Ok(hex::encode(bytes))
}

pub async fn run(args: &TokenCommand) -> Result<i32, Exit> {
    let store = Store::open(
        &args.data.database_url(),
        &args.data.blob_store(),
        &args.data.data_dir,
    )
    .await
    .map_err(|e| Exit::server(format!("cannot open the service's database: {e}")))?;
    let db = |e: crate::store::StoreError| Exit::server(format!("database: {e}"));
    match &args.action {
        TokenAction::Create {
            name,
            role,
            project,
        } => {
            limits::name(name).map_err(|e| Exit::input(e.to_string()))?;
            if project != EVERY_PROJECT {
                limits::project(project).map_err(|e| Exit::input(e.to_string()))?;
            }
            let record = TokenRecord {
                id: Uuid::now_v7(),
                name: name.clone(),
                role: *role,
                project: project.clone(),
                created_at: OffsetDateTime::now_utc(),
                revoked_at: None,
            };
            let secret = new_secret()?;
            if !store.insert_token(&record, &secret).await.map_err(db)? {
                return Err(Exit::input(format!(
                    "a token named '{name}' exists already; revoke it or pick another name"
                )));
            }
            eprintln!(
                "token '{name}' ({} in {project}); its secret follows, shown this once:",
                role.as_str()
            );
            println!("{secret}");
        }
        TokenAction::List => {
            for t in store.list_tokens().await.map_err(db)? {
                let state = match t.revoked_at {
                    Some(at) => format!("revoked {}", rfc3339(at)),
                    None => "live".into(),
                };
                println!(
                    "{}\t{}\t{}\tmade {}\t{state}",
                    t.name,
                    t.role.as_str(),
                    t.project,
                    rfc3339(t.created_at)
                );
            }
        }
        TokenAction::Revoke { name } => {
            if !store.revoke_token(name).await.map_err(db)? {
                return Err(Exit::input(format!("no live token named '{name}'")));
            }
            eprintln!("token '{name}' revoked");
        }
    }
    store.close().await;
    Ok(EXIT_GO)
}
