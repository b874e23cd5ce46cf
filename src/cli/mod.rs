//! The command-line side: `submit` (the CI gate), `adopt` (a passing
//! candidate becomes its project's baseline), `demo` (the main job on
//! bundled data), and what they share — the HTTP client and the renderings
//! of a report (table, Markdown, JUnit XML).

pub mod adopt;
pub mod client;
pub mod demo;
pub mod exit;
pub mod junit;
pub mod render;
pub mod submit;
