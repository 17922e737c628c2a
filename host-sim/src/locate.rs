//! Where a key stands in a TOML file: line, column and the value as
//! written, so a value refused after parsing (out of range, not finite, a
//! combination the core refuses) is named at its place in the file; and
//! the TOML reader's messages in the file's words instead of Rust type
//! names.

use std::fmt;

use toml::de::{DeTable, DeValue};
use toml::Spanned;

/// One step of a key path: a table key or an array index.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Seg<'a> {
    /// A key of a table.
    Key(&'a str),
    /// An element of an array (of tables).
    Index(usize),
}

/// A place in a file: 1-based line and column of a value, and the value as
/// written there.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Place {
    /// Line, from 1.
    pub line: usize,
    /// Column, from 1 (in characters).
    pub column: usize,
    /// The value's text as written (shortened when long).
    pub text: String,
}

impl fmt::Display for Place {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "line {}, column {}", self.line, self.column)
    }
}

/// Line and column (1-based) of byte offset `at` in `text`.
pub fn line_col(text: &str, at: usize) -> (usize, usize) {
    let at = at.min(text.len());
    let before = text.get(..at).unwrap_or(text);
    let line = before.matches('\n').count() + 1;
    let col = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
    (line, col)
}

fn place(text: &str, span: std::ops::Range<usize>) -> Place {
    let (line, column) = line_col(text, span.start);
    let raw = text.get(span).unwrap_or("").trim();
    let mut shown: String = raw.chars().take(60).collect();
    if raw.chars().count() > 60 {
        shown.push('…');
    }
    Place {
        line,
        column,
        text: shown,
    }
}

fn step<'a, 'i>(v: &'a Spanned<DeValue<'i>>, s: Seg<'_>) -> Option<&'a Spanned<DeValue<'i>>> {
    match (v.get_ref(), s) {
        (DeValue::Table(t), Seg::Key(k)) => t.get(k),
        (DeValue::Array(a), Seg::Index(i)) => a.get(i),
        _ => None,
    }
}

fn find<'a, 'i>(root: &'a Spanned<DeTable<'i>>, path: &[Seg<'_>]) -> Option<Spanned<()>> {
    let (first, rest) = path.split_first()?;
    let Seg::Key(k) = *first else { return None };
    let mut v = root.get_ref().get(k)?;
    for s in rest {
        v = step(v, *s)?;
    }
    Some(Spanned::new(v.span(), ()))
}

/// The place of the value at `path` in the TOML `text`; `None` when the
/// text does not parse or has no such key.
pub fn locate(text: &str, path: &[Seg<'_>]) -> Option<Place> {
    let root = DeTable::parse(text).ok()?;
    find(&root, path).map(|s| place(text, s.span()))
}

/// The keys of the table at `path` with the place of each key, in file
/// order; empty when there is no such table.
pub fn keys(text: &str, path: &[Seg<'_>]) -> Vec<(String, Place)> {
    let Ok(root) = DeTable::parse(text) else {
        return Vec::new();
    };
    let table = if path.is_empty() {
        Some(root.get_ref())
    } else {
        let (first, rest) = match path.split_first() {
            Some(x) => x,
            None => return Vec::new(),
        };
        let Seg::Key(k) = *first else {
            return Vec::new();
        };
        let mut v = root.get_ref().get(k);
        for s in rest {
            v = v.and_then(|v| step(v, *s));
        }
        match v.map(Spanned::get_ref) {
            Some(DeValue::Table(t)) => Some(t),
            _ => None,
        }
    };
    let mut out: Vec<(String, Place)> = table
        .into_iter()
        .flat_map(|t| t.iter())
        .map(|(k, _)| (k.get_ref().to_string(), place(text, k.span())))
        .collect();
    out.sort_by_key(|(_, p)| (p.line, p.column));
    out
}

/// The length of the array at `path` (0 when absent).
pub fn array_len(text: &str, path: &[Seg<'_>]) -> usize {
    let Ok(root) = DeTable::parse(text) else {
        return 0;
    };
    let Some((Seg::Key(k), rest)) = path.split_first() else {
        return 0;
    };
    let mut v = root.get_ref().get(*k);
    for s in rest {
        v = v.and_then(|v| step(v, *s));
    }
    match v.map(Spanned::get_ref) {
        Some(DeValue::Array(a)) => a.len(),
        _ => 0,
    }
}

/// A TOML reader's message with Rust type names replaced by what the file
/// must hold (`expected u16` becomes `expected an integer in 0 ..= 65535`).
pub fn plain_message(msg: &str) -> String {
    let mut s = msg.trim_end().to_string();
    for (rust, plain) in [
        ("expected u8", "expected an integer in 0 ..= 255"),
        ("expected u16", "expected an integer in 0 ..= 65535"),
        ("expected u32", "expected an integer in 0 ..= 4294967295"),
        (
            "expected u64",
            "expected an integer in 0 ..= 18446744073709551615",
        ),
        ("expected usize", "expected an integer >= 0"),
        (
            "expected i32",
            "expected an integer in -2147483648 ..= 2147483647",
        ),
        ("expected i64", "expected an integer"),
        ("expected f64", "expected a number"),
        ("expected a string", "expected a quoted text"),
    ] {
        s = s.replace(rust, plain);
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    const T: &str = "name = \"x\"\nduration_ms = 1e7\n\n[[event]]\nat_ms = 1\ndo = \"set-power\"\nmw = nan\n[[event]]\nat_ms = 2\ndo = \"inject\"\nfault = { kind = \"heatsink-loss\", factor = 0 }\n";

    #[test]
    fn values_are_found_with_line_column_and_text() {
        let p = locate(T, &[Seg::Key("duration_ms")]).unwrap();
        assert_eq!((p.line, p.column, p.text.as_str()), (2, 15, "1e7"));
        let p = locate(T, &[Seg::Key("event"), Seg::Index(0), Seg::Key("mw")]).unwrap();
        assert_eq!((p.line, p.column, p.text.as_str()), (7, 6, "nan"));
        let p = locate(
            T,
            &[
                Seg::Key("event"),
                Seg::Index(1),
                Seg::Key("fault"),
                Seg::Key("factor"),
            ],
        )
        .unwrap();
        assert_eq!((p.line, p.text.as_str()), (11, "0"));
        assert!(locate(T, &[Seg::Key("nope")]).is_none());
        assert!(locate("[[", &[Seg::Key("a")]).is_none());
    }

    #[test]
    fn messages_carry_no_rust_type_names() {
        let e: Result<std::collections::BTreeMap<String, u16>, _> = toml::from_str("a = 70000");
        let m = plain_message(&e.unwrap_err().to_string());
        assert!(m.contains("expected an integer in 0 ..= 65535"), "{m}");
        assert!(!m.contains("u16"), "{m}");
    }

    #[test]
    fn keys_of_a_table_in_file_order() {
        let k: Vec<String> = keys(T, &[Seg::Key("event"), Seg::Index(0)])
            .into_iter()
            .map(|(k, _)| k)
            .collect();
        assert_eq!(k, ["at_ms", "do", "mw"]);
        assert_eq!(array_len(T, &[Seg::Key("event")]), 2);
    }
}
