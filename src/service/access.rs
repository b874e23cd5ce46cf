//! Who is asking, and whether they may (api.md, "Access"): the roles
//! `reader`, `submitter`, `maintainer` and `admin`, each including the ones
//! before it, for one project or all. The HTTP edge says who the caller is;
//! the service decides what each operation needs.

use crate::error::AppError;
use crate::store::{EVERY_PROJECT, Role, TokenRecord};

/// The caller of one request.
#[derive(Debug, Clone)]
pub enum Caller {
    /// Access control is off: anyone on this machine may do anything.
    Open,
    /// No token, on a service whose reads are public.
    Public,
    Token(TokenRecord),
}

impl Caller {
    /// The name written as `created_by`, `canceled_by` or `set_by`.
    pub fn name(&self) -> Option<String> {
        match self {
            Caller::Token(t) => Some(t.name.clone()),
            Caller::Open | Caller::Public => None,
        }
    }

    /// Refuses the request unless the caller holds `role`, in `project`
    /// when the operation belongs to one.
    pub fn may(&self, role: Role, project: Option<&str>, doing: &str) -> Result<(), AppError> {
        let t = match self {
            Caller::Open => return Ok(()),
            Caller::Public => {
                return Err(AppError::Unauthorized(format!(
                    "{doing} needs a token: send Authorization: Bearer TOKEN"
                )));
            }
            Caller::Token(t) => t,
        };
        if t.role < role {
            return Err(AppError::Forbidden(format!(
                "token '{}' has role {}; {doing} needs {} or above",
                t.name,
                t.role.as_str(),
                role.as_str()
            )));
        }
        let everywhere = t.role == Role::Admin || t.project == EVERY_PROJECT;
        match project {
            Some(p) if !everywhere && t.project != p => Err(AppError::Forbidden(format!(
                "token '{}' belongs to project '{}'; {doing} is in project '{p}'",
                t.name, t.project
            ))),
            _ => Ok(()),
        }
    }
}

impl crate::service::App {
    /// The live token a dashboard sign-in names; 401 for any other secret.
    pub async fn sign_in(&self, secret: &str) -> Result<TokenRecord, AppError> {
        self.store
            .token_for_secret(secret.trim())
            .await?
            .ok_or_else(|| AppError::Unauthorized("the token is unknown or revoked".into()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn token(role: Role, project: &str) -> Caller {
        Caller::Token(TokenRecord {
            id: uuid::Uuid::now_v7(),
            name: "ci".into(),
            role,
            project: project.into(),
            created_at: time::OffsetDateTime::now_utc(),
            revoked_at: None,
        })
    }

    #[test]
    fn each_role_includes_the_ones_before_it() {
        let m = token(Role::Maintainer, "seed");
        assert!(m.may(Role::Reader, None, "x").is_ok());
        assert!(m.may(Role::Submitter, Some("seed"), "x").is_ok());
        assert!(m.may(Role::Maintainer, Some("seed"), "x").is_ok());
        let err = m.may(Role::Admin, None, "x").unwrap_err();
        assert_eq!(err.status_code(), 403);
    }

    #[test]
    fn a_project_token_acts_in_its_project_only_and_admin_everywhere() {
        let s = token(Role::Submitter, "seed");
        assert_eq!(
            s.may(Role::Submitter, Some("other"), "x")
                .unwrap_err()
                .status_code(),
            403
        );
        assert!(
            token(Role::Submitter, "*")
                .may(Role::Submitter, Some("other"), "x")
                .is_ok()
        );
        assert!(
            token(Role::Admin, "seed")
                .may(Role::Maintainer, Some("other"), "x")
                .is_ok()
        );
    }

    #[test]
    fn without_a_token_only_public_reads_pass_and_with_access_off_everything_does() {
        assert_eq!(
            Caller::Public
                .may(Role::Submitter, None, "x")
                .unwrap_err()
                .status_code(),
            401
        );
        assert!(Caller::Open.may(Role::Admin, Some("any"), "x").is_ok());
        assert_eq!(Caller::Public.name(), None);
        assert_eq!(token(Role::Reader, "*").name().as_deref(), Some("ci"));
    }
}
