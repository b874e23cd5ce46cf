//! Access tokens: a name, a role and a project (or `*`). The secret itself
//! is never stored, only its SHA-256; a revoked token is unknown from the
//! next lookup on.

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use time::OffsetDateTime;
use uuid::Uuid;

use super::{Store, StoreError};

/// What a token may do, each role including the ones before it (api.md, "Access").
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// Every read.
    Reader,
    /// Uploads; creating and canceling evaluations in its project.
    Submitter,
    /// Setting its project's baseline; deleting models and sets.
    Maintainer,
    /// Everything, in every project.
    Admin,
}

impl Role {
    pub const ALL: [Role; 4] = [Role::Reader, Role::Submitter, Role::Maintainer, Role::Admin];

    pub fn as_str(self) -> &'static str {
        match self {
            Role::Reader => "reader",
            Role::Submitter => "submitter",
            Role::Maintainer => "maintainer",
            Role::Admin => "admin",
        }
    }

    pub fn parse(s: &str) -> Option<Role> {
        Role::ALL.into_iter().find(|r| r.as_str() == s)
    }
}

/// The project that stands for all projects.
pub const EVERY_PROJECT: &str = "*";

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, sqlx::FromRow)]
pub struct TokenRecord {
    pub id: Uuid,
    pub name: String,
    pub role: Role,
    pub project: String,
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    #[serde(with = "time::serde::rfc3339::option")]
    pub revoked_at: Option<OffsetDateTime>,
}

/// The SHA-256 a secret is looked up by.
pub fn secret_hash(secret: &str) -> String {
    hex::encode(Sha256::digest(secret.as_bytes()))
}

impl Store {
    /// Stores a new token under the hash of `secret`; `false` when the name is taken.
    pub async fn insert_token(&self, t: &TokenRecord, secret: &str) -> Result<bool, StoreError> {
        on_pool!(self, |pool| {
            let done = sqlx::query(
                "INSERT INTO tokens (id, name, role, project, secret_sha256, created_at) \
             VALUES ($1, $2, $3, $4, $5, $6) ON CONFLICT (name) DO NOTHING",
            )
            .bind(t.id)
            .bind(&t.name)
            .bind(t.role)
            .bind(&t.project)
            .bind(secret_hash(secret))
            .bind(t.created_at)
            .execute(pool)
            .await?
            .rows_affected();
            Ok(done == 1)
        })
    }

    /// The live token whose secret this is.
    pub async fn token_for_secret(&self, secret: &str) -> Result<Option<TokenRecord>, StoreError> {
        on_pool!(self, |pool| {
            Ok(sqlx::query_as(
                "SELECT id, name, role, project, created_at, revoked_at FROM tokens \
             WHERE secret_sha256 = $1 AND revoked_at IS NULL",
            )
            .bind(secret_hash(secret))
            .fetch_optional(pool)
            .await?)
        })
    }

    pub async fn list_tokens(&self) -> Result<Vec<TokenRecord>, StoreError> {
        on_pool!(self, |pool| {
            Ok(sqlx::query_as(
                "SELECT id, name, role, project, created_at, revoked_at FROM tokens ORDER BY name",
            )
            .fetch_all(pool)
            .await?)
        })
    }

    /// Revokes the live token of this name; `false` when there is none.
    pub async fn revoke_token(&self, name: &str) -> Result<bool, StoreError> {
        on_pool!(self, |pool| {
            let done = sqlx::query(
                "UPDATE tokens SET revoked_at = $1 WHERE name = $2 AND revoked_at IS NULL",
            )
            .bind(OffsetDateTime::now_utc())
            .bind(name)
            .execute(pool)
            .await?
            .rows_affected();
            Ok(done == 1)
        })
    }
}
