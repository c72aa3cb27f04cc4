//! The model families a study file can name ([`FAMILIES`], declared one line each in
//! [`crate::models`]) and their lookup. A `[[model]]` table holds exactly one of their keys;
//! its value is the family's settings table.

use super::family::Registration;

/// Every model family a study file can name, in the order messages list them.
pub static FAMILIES: &[Registration] = &registrations!();

/// The family registered under `key`.
pub fn find(key: &str) -> Option<&'static Registration> {
    FAMILIES.iter().find(|r| r.key == key)
}

/// The keys, for messages: "esn, ngrc, … or command".
pub fn keys_listed() -> String {
    let keys: Vec<&str> = FAMILIES.iter().map(|r| r.key).collect();
    match keys.split_last() {
        Some((last, rest)) if !rest.is_empty() => format!("{} or {last}", rest.join(", ")),
        Some((last, _)) => last.to_string(),
        None => String::new(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Keys are unique and lowercase, and the list reads as the study-file message expects.
    #[test]
    fn keys_are_unique_and_listed_in_order() {
        let mut keys: Vec<&str> = FAMILIES.iter().map(|r| r.key).collect();
        assert_eq!(keys_listed(), "esn, ngrc, mlp, lstm, polynomial or command");
        keys.sort_unstable();
        keys.dedup();
        assert_eq!(keys.len(), FAMILIES.len());
        assert!(find("esn").is_some() && find("ESN").is_none());
    }
}
