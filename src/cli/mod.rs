//! The command-line side: `submit` (the CI gate), `demo` (the main job on
//! bundled data), and what they share — the HTTP client and the renderings
//! of a report (table, Markdown, JUnit XML).

pub mod client;
pub mod demo;
pub mod junit;
pub mod render;
pub mod submit;
