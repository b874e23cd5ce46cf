#![allow(unreachable_pub)]
//! The dashboard in a real headless Chromium (Debian's `chromium` and
//! `chromium-driver`), driven over WebDriver against the real server with
//! evaluations seeded through the API from the reference fixtures.
//! Screenshots of every page at 1280 and 1920 px land in
//! target/dashboard-screens/ for a person to look at.

#[path = "../support/mod.rs"]
mod support;

#[path = "../support/server.rs"]
#[allow(dead_code)]
mod harness;

mod browser;
mod seed;

mod compare_page;
mod error_pages;
mod evaluation_page;
mod list_page;
mod project_page;
mod running_page;
mod teacher_page;

use serde_json::Value;

/// Figures as the pages print them.
pub fn prop(v: &Value) -> String {
    format!("{:.4}", v.as_f64().unwrap())
}

pub fn signed(v: &Value) -> String {
    format!("{:+.4}", v.as_f64().unwrap())
}

/// Significant digits of a number written in text ("0.002296" has 4).
pub fn significant_digits(number: &str) -> usize {
    let digits: String = number.chars().filter(char::is_ascii_digit).collect();
    let trimmed = digits.trim_start_matches('0');
    if number.contains('.') {
        trimmed.len()
    } else {
        trimmed.trim_end_matches('0').len().max(1)
    }
}

/// Every number in a text, as written.
pub fn numbers_in(text: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut current = String::new();
    for ch in text.chars() {
        if ch.is_ascii_digit() || (ch == '.' && !current.is_empty()) {
            current.push(ch);
        } else if !current.is_empty() {
            out.push(
                std::mem::take(&mut current)
                    .trim_end_matches('.')
                    .to_string(),
            );
        }
    }
    if !current.is_empty() {
        out.push(current.trim_end_matches('.').to_string());
    }
    out
}
