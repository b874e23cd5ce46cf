//! The command-line side: `submit` (the CI gate), `wait` and `report`
//! (coming back to an evaluation later), `adopt` (a passing candidate
//! becomes its project's baseline), `token` (access tokens, on the
//! service's own database), `demo` (the main job on bundled data),
//! and what they share — the HTTP client, following an evaluation, and the
//! renderings of a report (table, Markdown, JUnit XML, CSV).

pub mod adopt;
pub mod bundle;
pub mod client;
pub mod connection;
pub mod demo;
pub mod exit;
pub mod follow;
pub mod junit;
pub mod outputs;
pub mod render;
pub mod submit;
pub mod token;
