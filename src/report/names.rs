//! Reading back the report's names (method names, warning codes, calibration
//! sources ...), which the report types hold as `&'static str`: an image's
//! report is read back from the journal of an interrupted run (see
//! [`crate::journal`]). Each distinct name is allocated once for the life of
//! the process and shared by every report that holds it, so reading many
//! images costs no more memory per name than the first.

use serde::{Deserialize, Deserializer};
use std::collections::{BTreeMap, BTreeSet};
use std::sync::Mutex;

/// A name held by a report type that is read back with [`name`]. (Spelt
/// through this alias, the field is not taken by serde's derive for a
/// string borrowed from the input, which a `'static` one cannot be.)
pub type Name = &'static str;

/// The process's one copy of `s`.
pub fn intern(s: &str) -> &'static str {
    static NAMES: Mutex<BTreeSet<&'static str>> = Mutex::new(BTreeSet::new());
    // A panic elsewhere while the set was held leaves it whole (an insert
    // either happened or not), so a poisoned lock is used as it is.
    let mut names = NAMES.lock().unwrap_or_else(|p| p.into_inner());
    if let Some(n) = names.get(s) {
        return n;
    }
    let n: &'static str = Box::leak(s.to_owned().into_boxed_str());
    names.insert(n);
    n
}

pub fn name<'de, D: Deserializer<'de>>(d: D) -> Result<&'static str, D::Error> {
    let s = String::deserialize(d)?;
    Ok(intern(&s))
}

pub fn optional_name<'de, D: Deserializer<'de>>(d: D) -> Result<Option<&'static str>, D::Error> {
    let s = Option::<String>::deserialize(d)?;
    Ok(s.as_deref().map(intern))
}

pub fn names<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<&'static str>, D::Error> {
    let v = Vec::<String>::deserialize(d)?;
    Ok(v.iter().map(|s| intern(s)).collect())
}

pub fn name_map<'de, D: Deserializer<'de>>(d: D) -> Result<BTreeMap<&'static str, f64>, D::Error> {
    let m = BTreeMap::<String, f64>::deserialize(d)?;
    Ok(m.iter().map(|(k, v)| (intern(k), *v)).collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_name_is_allocated_once() {
        let a = intern(&String::from("fft.few-tiles"));
        let b = intern(&String::from("fft.few-tiles"));
        assert_eq!(a, "fft.few-tiles");
        assert!(std::ptr::eq(a, b));
    }
}
