//! The reference in `docs/` covers every key the configuration files accept. The keys are read
//! from the code itself: the fields of the serde mirrors that refuse unknown keys
//! (`#[serde(deny_unknown_fields)]`), so a new key without documentation fails here.

use std::collections::BTreeSet;

use crate::util;

/// `(struct, field)` of every `deny_unknown_fields` struct in a source file.
fn keys_of(rel: &str) -> Vec<(String, String)> {
    let text = std::fs::read_to_string(util::root().join(rel)).unwrap();
    let mut keys = Vec::new();
    let mut lines = text.lines().peekable();
    while let Some(line) = lines.next() {
        if !(line.trim_start().starts_with("#[serde(") && line.contains("deny_unknown_fields")) {
            continue;
        }
        let Some(head) = lines.by_ref().find(|l| l.contains("struct ")) else { break };
        let name = head.split("struct ").nth(1).unwrap().split([' ', '{', '<']).next().unwrap().to_string();
        for l in lines.by_ref() {
            if l.starts_with('}') {
                break;
            }
            let t = l.trim();
            if let Some(rest) = t.strip_prefix("pub ")
                && let Some((field, _)) = rest.split_once(':')
                && field.chars().all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '#')
            {
                keys.push((name.clone(), field.trim_start_matches("r#").to_string()));
            }
        }
    }
    keys
}

/// A key is documented when a doc names it in code style (`` `key` ``, `` `key = … ``), as a
/// table (`[unit.key]`, `[[unit.key]]`, `[key]`) or in a TOML example (`key = …` at the start
/// of a line or inside an inline table).
fn documented(doc: &str, key: &str) -> bool {
    let code = [format!("`{key}`"), format!("`{key} ="), format!("{{ {key} ="), format!(", {key} =")];
    let table = [format!(".{key}]"), format!("[{key}]"), format!("[{key}."), format!(".{key}.")];
    code.iter().chain(&table).any(|p| doc.contains(p.as_str()))
        || doc.lines().any(|l| l.trim_start().starts_with(&format!("{key} =")))
}

#[test]
fn every_configuration_key_is_documented() {
    let read = |rel: &str| std::fs::read_to_string(util::root().join(rel)).unwrap();
    let site_docs = read("docs/configuration.md") + &read("docs/operation.md");
    let calc_docs = read("docs/calc.md");
    let sets: [(&[&str], &str, &str); 2] = [
        (&["src/config/raw.rs"], &site_docs, "docs/configuration.md"),
        (&["src/config/case/raw.rs", "src/thermo/component.rs"], &calc_docs, "docs/calc.md"),
    ];
    let mut missing = BTreeSet::new();
    let mut seen = 0;
    for (files, doc, doc_name) in sets {
        for file in files {
            for (st, key) in keys_of(file) {
                seen += 1;
                if !documented(doc, &key) {
                    missing.insert(format!("{doc_name}: `{key}` ({st} in {file})"));
                }
            }
        }
    }
    // The mirrors hold well over a hundred keys; a parser that finds few has broken.
    assert!(seen > 120, "only {seen} keys found: the key scan no longer matches the code");
    assert!(missing.is_empty(), "keys the code accepts but docs/ does not mention:\n{}", {
        let v: Vec<String> = missing.into_iter().collect();
        v.join("\n")
    });
}
