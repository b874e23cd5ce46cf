//! The limits of the contract on free-form input (api.md, "Limits"): each
//! refusal is a 422 naming the field, before anything is stored.

use std::collections::BTreeMap;

use uuid::Uuid;

use crate::error::AppError;

pub const MAX_NAME_CHARS: usize = 200;
pub const MAX_TAGS: usize = 32;
pub const MAX_TAG_KEY: usize = 64;
pub const MAX_TAG_VALUE: usize = 256;
pub const MAX_STUDENTS: usize = 32;
pub const MAX_PROJECT_CHARS: usize = 100;

fn refuse(field: &str, detail: String) -> AppError {
    AppError::unprocessable(detail, Some(field))
}

/// `[A-Za-z0-9][A-Za-z0-9._-]{0,99}`.
pub fn project(name: &str) -> Result<(), AppError> {
    let mut chars = name.chars();
    let first_ok = chars.next().is_some_and(|c| c.is_ascii_alphanumeric());
    let rest_ok = chars.all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-'));
    if first_ok && rest_ok && name.len() <= MAX_PROJECT_CHARS {
        Ok(())
    } else {
        Err(refuse(
            "project",
            format!(
                "a project name is 1 to {MAX_PROJECT_CHARS} letters, digits, '.', '_' or '-', \
                 starting with a letter or digit"
            ),
        ))
    }
}

/// An upload's name: at most 200 characters, none of them control characters.
pub fn name(name: &str) -> Result<(), AppError> {
    if name.chars().count() > MAX_NAME_CHARS {
        return Err(refuse(
            "name",
            format!("a name holds at most {MAX_NAME_CHARS} characters"),
        ));
    }
    if name.chars().any(char::is_control) {
        return Err(refuse(
            "name",
            "a name may not hold control characters".into(),
        ));
    }
    Ok(())
}

fn tag_key_ok(key: &str) -> bool {
    !key.is_empty()
        && key.len() <= MAX_TAG_KEY
        && key
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | ':' | '/' | '-'))
}

pub fn tags(tags: &BTreeMap<String, String>) -> Result<(), AppError> {
    if tags.len() > MAX_TAGS {
        return Err(refuse("tags", format!("at most {MAX_TAGS} tags")));
    }
    for (key, value) in tags {
        if !tag_key_ok(key) {
            return Err(refuse(
                "tags",
                format!(
                    "tag key '{}' must be 1 to {MAX_TAG_KEY} of A-Z a-z 0-9 . _ : / -",
                    key.chars().take(80).collect::<String>()
                ),
            ));
        }
        // NUL is text on SQLite but not on PostgreSQL: refused on both alike.
        if value.contains('\0') {
            return Err(refuse(
                &format!("tags.{key}"),
                "a tag value holds no NUL character".into(),
            ));
        }
        if value.chars().count() > MAX_TAG_VALUE {
            return Err(refuse(
                &format!("tags.{key}"),
                format!("a tag value holds at most {MAX_TAG_VALUE} characters"),
            ));
        }
    }
    Ok(())
}

/// Worker labels (`runs_on`, and `proctor worker --labels`): `key=value`
/// pairs whose keys and values read unchanged in that form.
pub fn labels(field: &str, labels: &BTreeMap<String, String>) -> Result<(), AppError> {
    crate::labels::check(labels).map_err(|why| refuse(field, why))
}

pub fn students(students: &[Uuid]) -> Result<(), AppError> {
    if students.is_empty() {
        return Err(refuse("students", "give at least one student".into()));
    }
    if students.len() > MAX_STUDENTS {
        return Err(refuse(
            "students",
            format!("at most {MAX_STUDENTS} students in one evaluation"),
        ));
    }
    for (i, s) in students.iter().enumerate() {
        if students[..i].contains(s) {
            return Err(refuse(
                &format!("students[{i}]"),
                format!("student {s} is listed twice"),
            ));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn project_names_follow_the_contracts_pattern() {
        for ok in ["turbine-acoustics", "a", "A.b_c-9", &"x".repeat(100)] {
            assert!(project(ok).is_ok(), "{ok}");
        }
        for bad in ["", "-lead", ".x", "has space", "naïve", &"x".repeat(101)] {
            assert!(project(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn tags_are_bounded_in_number_and_length() {
        let many: BTreeMap<String, String> =
            (0..33).map(|i| (format!("k{i}"), "v".into())).collect();
        assert!(tags(&many).is_err());
        let long: BTreeMap<String, String> = [("commit".into(), "x".repeat(257))].into();
        let err = tags(&long).unwrap_err();
        assert_eq!(err.problem().field.as_deref(), Some("tags.commit"));
        let odd_key: BTreeMap<String, String> = [("a b".into(), "v".into())].into();
        assert!(tags(&odd_key).is_err());
    }

    #[test]
    fn a_student_listed_twice_is_refused_where_it_repeats() {
        let a = Uuid::now_v7();
        let err = students(&[a, Uuid::now_v7(), a]).unwrap_err();
        assert_eq!(err.problem().field.as_deref(), Some("students[2]"));
        assert!(students(&[a; 0]).is_err());
    }

    #[test]
    fn names_hold_no_control_characters() {
        assert!(name("teacher v2").is_ok());
        assert!(name("bad\u{7}bell").is_err());
        assert!(name(&"n".repeat(201)).is_err());
    }
}
