//! Source files and located errors: every problem in a TOML input names its file, line, column
//! and key.
//!
//! Parsing is two-stage (a serde mirror, then a checked model). The serde stage reports byte
//! spans; the checking stage reports key paths. [`SourceText`] turns either into a
//! [`Location`] by walking the spanned TOML document, so checked-model code never carries spans.

use std::collections::HashMap;
use std::fmt;
use std::ops::Range;
use std::path::{Path, PathBuf};

use toml::de::{DeTable, DeValue};

/// One segment of a key path: a table key or a 0-based array index.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub enum Seg {
    /// A table key.
    Key(String),
    /// An array element (0-based; displayed 1-based).
    Index(usize),
}

/// A path of keys into a TOML document, e.g. `feed[2].composition.water`.
///
/// Array indices display 1-based (`feed[1]` is the first `[[feed]]` table), because the people
/// reading these messages count tables from one.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct KeyPath(pub Vec<Seg>);

impl KeyPath {
    /// The empty path (the whole document).
    pub fn root() -> Self {
        KeyPath(Vec::new())
    }

    /// Parse a dotted path whose segments are plain keys (`"model.enthalpy"`).
    pub fn keys(dotted: &str) -> Self {
        KeyPath(dotted.split('.').filter(|s| !s.is_empty()).map(|s| Seg::Key(s.to_string())).collect())
    }

    /// This path extended by a key.
    pub fn key(&self, key: &str) -> Self {
        let mut next = self.clone();
        next.0.push(Seg::Key(key.to_string()));
        next
    }

    /// This path extended by a 0-based array index.
    pub fn index(&self, index: usize) -> Self {
        let mut next = self.clone();
        next.0.push(Seg::Index(index));
        next
    }
}

impl fmt::Display for KeyPath {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut first = true;
        for seg in &self.0 {
            match seg {
                Seg::Key(k) => {
                    if !first {
                        f.write_str(".")?;
                    }
                    f.write_str(k)?;
                }
                Seg::Index(i) => write!(f, "[{}]", i + 1)?,
            }
            first = false;
        }
        if first {
            f.write_str("(document)")?;
        }
        Ok(())
    }
}

/// Where a problem is: file, 1-based line and column (when known) and key path.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Location {
    /// The file as given on the command line or in an include.
    pub file: PathBuf,
    /// 1-based line and column, when the position could be found.
    pub line_col: Option<(usize, usize)>,
    /// The key path, when known.
    pub key: Option<KeyPath>,
}

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some((line, col)) = self.line_col {
            write!(f, ":{line}:{col}")?;
        }
        if let Some(key) = &self.key {
            write!(f, ": `{key}`")?;
        }
        Ok(())
    }
}

/// An error located in a source file. Display: ``case.toml:12:9: `feed[1].flow`: message``.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{location}: {message}")]
pub struct LocatedError {
    /// Where the problem is.
    pub location: Location,
    /// What is wrong, in one sentence, with the offending value where useful.
    pub message: String,
}

/// A list of located errors (a check reports every problem, not only the first).
#[derive(Debug, Clone, Default, PartialEq, Eq, thiserror::Error)]
pub struct LocatedErrors(pub Vec<LocatedError>);

impl fmt::Display for LocatedErrors {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (i, e) in self.0.iter().enumerate() {
            if i > 0 {
                f.write_str("\n")?;
            }
            write!(f, "{e}")?;
        }
        Ok(())
    }
}

impl From<LocatedError> for LocatedErrors {
    fn from(e: LocatedError) -> Self {
        LocatedErrors(vec![e])
    }
}

/// Record the span of every value under `node` (at `path`) in `map`.
fn collect_spans(node: &DeValue<'_>, path: &mut Vec<Seg>, map: &mut HashMap<Vec<Seg>, Range<usize>>) {
    match node {
        DeValue::Table(t) => {
            for (k, v) in t {
                path.push(Seg::Key(k.get_ref().to_string()));
                map.insert(path.clone(), v.span());
                collect_spans(v.get_ref(), path, map);
                path.pop();
            }
        }
        DeValue::Array(a) => {
            for (i, v) in a.iter().enumerate() {
                path.push(Seg::Index(i));
                map.insert(path.clone(), v.span());
                collect_spans(v.get_ref(), path, map);
                path.pop();
            }
        }
        _ => {}
    }
}

/// The text of one input file, kept so that errors can be located after parsing.
#[derive(Debug, Clone)]
pub struct SourceText {
    /// Path as given (used verbatim in messages).
    pub path: PathBuf,
    /// Full text.
    pub text: String,
    /// The span of every key path in the text, built the first time one is asked for (a
    /// check of a large site locates many problems: one parse, not one per problem).
    spans: std::sync::OnceLock<HashMap<Vec<Seg>, Range<usize>>>,
}

impl SourceText {
    /// Wrap text read from `path`.
    pub fn new(path: impl Into<PathBuf>, text: impl Into<String>) -> Self {
        SourceText { path: path.into(), text: text.into(), spans: std::sync::OnceLock::new() }
    }

    /// Read a file; the error is located at the file itself.
    pub fn read(path: &Path) -> Result<Self, LocatedError> {
        match std::fs::read_to_string(path) {
            Ok(text) => Ok(SourceText::new(path, text)),
            Err(e) => Err(LocatedError {
                location: Location { file: path.to_path_buf(), line_col: None, key: None },
                message: format!("cannot read the file: {e}"),
            }),
        }
    }

    /// 1-based line and column of a byte offset.
    pub fn line_col(&self, offset: usize) -> (usize, usize) {
        let offset = offset.min(self.text.len());
        let before = &self.text[..offset];
        let line = before.matches('\n').count() + 1;
        let line_start = before.rfind('\n').map_or(0, |i| i + 1);
        let col = before[line_start..].chars().count() + 1;
        (line, col)
    }

    /// The byte span of the value at `key`, or of the deepest existing parent when the key is
    /// missing (so "missing key" errors point at the table that should contain it).
    pub fn span_of(&self, key: &KeyPath) -> Option<Range<usize>> {
        let spans = self.spans.get_or_init(|| {
            let mut map = HashMap::new();
            if let Ok(doc) = DeTable::parse(&self.text) {
                let root = DeValue::Table(doc.into_inner());
                collect_spans(&root, &mut Vec::new(), &mut map);
            }
            map
        });
        (1..=key.0.len()).rev().find_map(|n| spans.get(&key.0[..n]).cloned())
    }

    /// Locate a key path.
    pub fn locate(&self, key: &KeyPath) -> Location {
        Location {
            file: self.path.clone(),
            // A key whose tables are all missing is reported at the top of the file.
            line_col: Some(self.span_of(key).map_or((1, 1), |s| self.line_col(s.start))),
            key: Some(key.clone()),
        }
    }

    /// A located error at a key path.
    pub fn error_at(&self, key: &KeyPath, message: impl Into<String>) -> LocatedError {
        LocatedError { location: self.locate(key), message: message.into() }
    }

    /// The deepest key path whose value (or key) span contains `offset` (for serde errors,
    /// which carry a span but no path). Every node is searched: the span of a table opened by
    /// a `[header]` does not cover its body.
    pub fn key_at(&self, offset: usize) -> Option<KeyPath> {
        fn search(node: &DeValue<'_>, offset: usize, path: &mut KeyPath) -> bool {
            match node {
                DeValue::Table(table) => {
                    for (k, v) in table.iter() {
                        path.0.push(Seg::Key(k.get_ref().to_string()));
                        if search(v.get_ref(), offset, path)
                            || v.span().contains(&offset)
                            || k.span().contains(&offset)
                        {
                            return true;
                        }
                        path.0.pop();
                    }
                    false
                }
                DeValue::Array(items) => {
                    for (i, v) in items.iter().enumerate() {
                        path.0.push(Seg::Index(i));
                        if search(v.get_ref(), offset, path) || v.span().contains(&offset) {
                            return true;
                        }
                        path.0.pop();
                    }
                    false
                }
                _ => false,
            }
        }
        let doc = DeTable::parse(&self.text).ok()?;
        let root = DeValue::Table(doc.into_inner());
        let mut path = KeyPath::root();
        if search(&root, offset, &mut path) { Some(path) } else { None }
    }

    /// Deserialize the whole document (stage one), reporting as many problems as it can: after
    /// each located problem (an unknown key, a value of the wrong type) that line is set aside
    /// and the document read again, up to 25 problems, as long as setting lines aside leaves
    /// valid TOML (a multi-line value's line is not set aside; the problems up to it are
    /// reported).
    pub fn deserialize_all<T: serde::de::DeserializeOwned>(&self) -> Result<T, Vec<LocatedError>> {
        let mut text = self.text.clone();
        let mut errors: Vec<LocatedError> = Vec::new();
        for _ in 0..25 {
            let e = match toml::from_str::<T>(&text) {
                Ok(v) if errors.is_empty() => return Ok(v),
                Ok(_) => return Err(errors),
                Err(e) => e,
            };
            let span = e.span();
            errors.push(self.located(&e));
            // Blank the problem's line (same length, so every offset stays where it was).
            let Some(at) = span.map(|s| s.start.min(text.len())) else { break };
            let start = text[..at].rfind('\n').map_or(0, |i| i + 1);
            let end = text[at..].find('\n').map_or(text.len(), |i| at + i);
            if text[start..end].trim().is_empty() {
                break;
            }
            let blanked = format!("{}{}{}", &text[..start], " ".repeat(end - start), &text[end..]);
            if toml::from_str::<toml::Table>(&blanked).is_err() {
                break;
            }
            text = blanked;
        }
        Err(errors)
    }

    /// Deserialize the whole document (stage one), turning serde errors into located errors.
    pub fn deserialize<T: serde::de::DeserializeOwned>(&self) -> Result<T, LocatedError> {
        toml::from_str::<T>(&self.text).map_err(|e| self.located(&e))
    }

    /// A TOML or serde error of this document, located by its span.
    fn located(&self, e: &toml::de::Error) -> LocatedError {
        let span = e.span();
        LocatedError {
            location: Location {
                file: self.path.clone(),
                line_col: span.as_ref().map(|s| self.line_col(s.start)),
                key: span.and_then(|s| self.key_at(s.start)),
            },
            message: e.message().trim().to_string(),
        }
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    const DOC: &str = "[model]\nenthalpy = \"auto\"\n\n[[feed]]\nflow = 1.0\n\n[[feed]]\nflow = 2.0\ncomposition = { water = 1.0 }\n";

    #[test]
    fn locates_keys_and_array_elements() {
        let src = SourceText::new("case.toml", DOC);
        let loc = src.locate(&KeyPath::keys("model.enthalpy"));
        assert_eq!(loc.line_col, Some((2, 12)));
        let loc = src.locate(&KeyPath::keys("feed").index(1).key("composition").key("water"));
        assert_eq!(loc.line_col.map(|(l, _)| l), Some(9));
        assert_eq!(loc.to_string(), "case.toml:9:25: `feed[2].composition.water`");
    }

    #[test]
    fn missing_key_points_at_parent() {
        let src = SourceText::new("case.toml", DOC);
        let loc = src.locate(&KeyPath::keys("feed").index(0).key("temperature"));
        assert_eq!(loc.line_col.map(|(l, _)| l), Some(4));
    }

    #[test]
    fn key_at_offset() {
        let src = SourceText::new("case.toml", DOC);
        let offset = DOC.find("2.0").unwrap_or_default();
        assert_eq!(src.key_at(offset).map(|k| k.to_string()).as_deref(), Some("feed[2].flow"));
    }

    /// Stage one reports every unknown key and wrongly typed value it can, each located, not
    /// only the first.
    #[test]
    fn stage_one_reports_several_problems() {
        #[derive(Debug, serde::Deserialize)]
        #[serde(deny_unknown_fields)]
        #[allow(dead_code)]
        struct Model {
            enthalpy: Option<String>,
            pressure: Option<f64>,
        }
        #[derive(Debug, serde::Deserialize)]
        #[serde(deny_unknown_fields)]
        #[allow(dead_code)]
        struct Doc {
            model: Model,
        }
        let text = "[model]\nenthalpi = \"auto\"\npressure = \"high\"\nwatsn = 0.38\n";
        let src = SourceText::new("site.toml", text);
        let errs = src.deserialize_all::<Doc>().unwrap_err();
        let lines: Vec<usize> = errs.iter().filter_map(|e| e.location.line_col.map(|(l, _)| l)).collect();
        assert_eq!(lines, vec![2, 3, 4], "{errs:?}");
        assert!(errs[0].message.contains("enthalpi"), "{}", errs[0].message);
        let ok = SourceText::new("site.toml", "[model]\nenthalpy = \"auto\"\n");
        assert!(ok.deserialize_all::<Doc>().is_ok());
    }
}
