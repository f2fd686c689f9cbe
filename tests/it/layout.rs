//! The shape of the source tree, checked from the source itself:
//!
//! * imports run one way: `app` → `pipeline` → `config`/`requests` → {`ingest`, `core`,
//!   `sinks`} → `thermo` → the leaves (`units`, `source`, `hash`, `rng`); `ingest` and `sinks`
//!   may use `core`, never each other, and `core` uses neither;
//! * no module imports another that (directly or not) imports it back (a folder's `mod.rs`
//!   owning its children is not counted as an import);
//! * no function outside tests is longer than 120 lines.
//!
//! Paths are read from `crate::…` and `super::…` references in the code (comments and test
//! modules skipped), which is how every module in this crate names another.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

use crate::util::root;

/// The longest function allowed outside tests, in lines.
const MAX_FN_LINES: usize = 120;

/// A source file and its module path (`core::monitor::engine`).
struct Module {
    path: PathBuf,
    name: String,
    /// Lines of code before the test module, comments blanked.
    code: Vec<String>,
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap().flatten() {
        let p = e.path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// Blank out comments and the contents of string and character literals, so that braces and
/// paths inside them are not read as code. Line structure is kept.
fn strip(text: &str) -> String {
    let b: Vec<char> = text.chars().collect();
    let mut out = String::with_capacity(text.len());
    let mut i = 0;
    while i < b.len() {
        let c = b[i];
        let next = b.get(i + 1).copied();
        if c == '/' && next == Some('/') {
            while i < b.len() && b[i] != '\n' {
                i += 1;
            }
        } else if c == '/' && next == Some('*') {
            while i + 1 < b.len() && !(b[i] == '*' && b[i + 1] == '/') {
                if b[i] == '\n' {
                    out.push('\n');
                }
                i += 1;
            }
            i += 2;
        } else if c == 'r' && (next == Some('"') || next == Some('#')) && !prev_ident(&b, i) {
            // Raw string: r"…", r#"…"#.
            let mut j = i + 1;
            let mut hashes = 0;
            while b.get(j) == Some(&'#') {
                hashes += 1;
                j += 1;
            }
            if b.get(j) != Some(&'"') {
                out.push(c);
                i += 1;
                continue;
            }
            j += 1;
            out.push_str("\"\"");
            loop {
                if j >= b.len() {
                    break;
                }
                if b[j] == '"' && (0..hashes).all(|k| b.get(j + 1 + k) == Some(&'#')) {
                    j += 1 + hashes;
                    break;
                }
                if b[j] == '\n' {
                    out.push('\n');
                }
                j += 1;
            }
            i = j;
        } else if c == '"' {
            out.push_str("\"\"");
            i += 1;
            while i < b.len() && b[i] != '"' {
                if b[i] == '\\' {
                    i += 1;
                }
                if b.get(i) == Some(&'\n') {
                    out.push('\n');
                }
                i += 1;
            }
            i += 1;
        } else if c == '\'' && next.is_some() {
            // A character literal ('x', '\n', '\u{1f}'), not a lifetime ('a).
            let close = if next == Some('\\') {
                (i + 2..b.len().min(i + 12)).find(|&k| b[k] == '\'')
            } else if b.get(i + 2) == Some(&'\'') {
                Some(i + 2)
            } else {
                None
            };
            match close {
                Some(k) => {
                    out.push_str("' '");
                    i = k + 1;
                }
                None => {
                    out.push(c);
                    i += 1;
                }
            }
        } else {
            out.push(c);
            i += 1;
        }
    }
    out
}

fn prev_ident(b: &[char], i: usize) -> bool {
    i > 0 && (b[i - 1].is_alphanumeric() || b[i - 1] == '_')
}

fn modules() -> Vec<Module> {
    let src = root().join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    files.sort();
    let mut out = Vec::new();
    for path in files {
        let rel = path.strip_prefix(&src).unwrap().with_extension("");
        let mut parts: Vec<String> = rel.iter().map(|p| p.to_string_lossy().into_owned()).collect();
        if parts.last().is_some_and(|l| l == "mod" || l == "lib") {
            parts.pop();
        }
        // The binary's entry point, and test-only modules (`mod tests;` files).
        if parts == ["main"] || parts.last().is_some_and(|l| l == "tests") {
            continue;
        }
        let text = std::fs::read_to_string(&path).unwrap();
        let stripped = strip(&text);
        // Everything from a test module on (`#[cfg(test)]` then `mod`) is test code.
        let lines: Vec<&str> = stripped.lines().collect();
        let mut code = Vec::new();
        for (i, line) in lines.iter().enumerate() {
            let test_module = line.starts_with("#[cfg(test)]")
                && lines[i + 1..]
                    .iter()
                    .find(|l| !l.starts_with("#["))
                    .is_some_and(|l| l.starts_with("mod "));
            if test_module {
                break;
            }
            code.push((*line).to_string());
        }
        out.push(Module { path, name: parts.join("::"), code });
    }
    out
}

/// Module paths named by `crate::a::b…` and `super::…` in a line, resolved against `known`.
fn references(module: &str, is_dir_module: bool, line: &str, known: &BTreeSet<String>) -> Vec<String> {
    let mut found = Vec::new();
    let resolve = |segments: Vec<String>, found: &mut Vec<String>| {
        // The longest prefix that is a module.
        for n in (1..=segments.len()).rev() {
            let cand = segments[..n].join("::");
            if known.contains(&cand) {
                found.push(cand);
                return;
            }
        }
    };
    let words = |s: &str| -> Vec<String> {
        s.split("::")
            .map(|w| w.chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect::<String>())
            .take_while(|w| !w.is_empty())
            .collect()
    };
    for (pos, _) in line.match_indices("crate::") {
        if pos > 0 && line[..pos].ends_with(|c: char| c.is_alphanumeric() || c == '_' || c == '$') {
            continue;
        }
        let rest = &line[pos + 7..];
        let head = words(rest);
        // `crate::a::{b, c::d}` names a::b and a::c::d.
        let after: String = rest.chars().skip(head.iter().map(|w| w.len() + 2).sum::<usize>()).collect();
        if let Some(inner) = after.strip_prefix('{') {
            let inner = inner.split('}').next().unwrap_or("");
            for item in inner.split(',') {
                let mut seg = head.clone();
                seg.extend(words(item.trim()));
                resolve(seg, &mut found);
            }
        } else {
            resolve(head, &mut found);
        }
    }
    for (pos, _) in line.match_indices("super::") {
        if pos > 0 && line[..pos].ends_with(|c: char| c.is_alphanumeric() || c == '_' || c == ':') {
            continue;
        }
        let mut base: Vec<String> = module.split("::").map(str::to_string).collect();
        // `super` of a folder's mod.rs is the folder's parent, of a file its folder.
        let _ = is_dir_module;
        base.pop();
        let mut rest = &line[pos + 7..];
        while let Some(r) = rest.strip_prefix("super::") {
            base.pop();
            rest = r;
        }
        let mut seg = base;
        let head = words(rest);
        let after: String = rest.chars().skip(head.iter().map(|w| w.len() + 2).sum::<usize>()).collect();
        if let Some(inner) = after.strip_prefix('{') {
            let inner = inner.split('}').next().unwrap_or("");
            for item in inner.split(',') {
                let mut s = seg.clone();
                s.extend(head.clone());
                s.extend(words(item.trim()));
                resolve(s, &mut found);
            }
        } else {
            seg.extend(head);
            resolve(seg, &mut found);
        }
    }
    found
}

/// The import graph between modules: `a -> b` when `a` names `b` (a parent naming its own
/// child is ownership, not an import).
fn graph() -> BTreeMap<String, BTreeSet<String>> {
    let mods = modules();
    let known: BTreeSet<String> = mods.iter().map(|m| m.name.clone()).filter(|n| !n.is_empty()).collect();
    let mut g: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
    for m in &mods {
        if m.name.is_empty() {
            continue;
        }
        let dir_module = m.path.file_name().is_some_and(|f| f == "mod.rs");
        let edges = g.entry(m.name.clone()).or_default();
        for line in &m.code {
            for r in references(&m.name, dir_module, line, &known) {
                let child = r.starts_with(&format!("{}::", m.name));
                if r != m.name && !child {
                    edges.insert(r);
                }
            }
        }
    }
    g
}

/// Rank of a module's top-level folder in the one-way order (higher imports lower).
fn rank(module: &str) -> (u8, &str) {
    let top = module.split("::").next().unwrap_or("");
    let r = match top {
        "units" | "source" | "hash" | "rng" => 0,
        "thermo" => 1,
        "core" => 2,
        "ingest" | "sinks" => 3,
        "config" | "requests" => 4,
        "pipeline" => 5,
        "app" => 6,
        _ => 9,
    };
    (r, top)
}

#[test]
fn imports_run_one_way() {
    let g = graph();
    let mut bad = Vec::new();
    for (from, tos) in &g {
        let (rf, tf) = rank(from);
        assert!(rf < 9, "module `{from}` has no place in the layer order of this test");
        for to in tos {
            let (rt, tt) = rank(to);
            let ok = tf == tt || rf > rt || (rf == 0 && rt == 0);
            if !ok {
                bad.push(format!("{from} -> {to}"));
            }
        }
    }
    assert!(bad.is_empty(), "imports against the layer order:\n  {}", bad.join("\n  "));
}

#[test]
fn no_module_imports_itself_back() {
    let g = graph();
    // Tarjan's strongly connected components.
    struct T<'a> {
        g: &'a BTreeMap<String, BTreeSet<String>>,
        index: BTreeMap<&'a str, usize>,
        low: BTreeMap<&'a str, usize>,
        stack: Vec<&'a str>,
        on: BTreeSet<&'a str>,
        next: usize,
        sccs: Vec<Vec<&'a str>>,
    }
    fn visit<'a>(t: &mut T<'a>, v: &'a str) {
        t.index.insert(v, t.next);
        t.low.insert(v, t.next);
        t.next += 1;
        t.stack.push(v);
        t.on.insert(v);
        let g = t.g;
        for w in g.get(v).into_iter().flatten() {
            let w = w.as_str();
            if !t.index.contains_key(w) {
                visit(t, w);
                let lw = t.low[w];
                let lv = t.low[v];
                t.low.insert(v, lv.min(lw));
            } else if t.on.contains(w) {
                let iw = t.index[w];
                let lv = t.low[v];
                t.low.insert(v, lv.min(iw));
            }
        }
        if t.low[v] == t.index[v] {
            let mut scc = Vec::new();
            while let Some(w) = t.stack.pop() {
                t.on.remove(w);
                scc.push(w);
                if w == v {
                    break;
                }
            }
            if scc.len() > 1 {
                scc.sort_unstable();
                t.sccs.push(scc);
            }
        }
    }
    let mut t = T {
        g: &g,
        index: BTreeMap::new(),
        low: BTreeMap::new(),
        stack: Vec::new(),
        on: BTreeSet::new(),
        next: 0,
        sccs: Vec::new(),
    };
    for v in g.keys() {
        if !t.index.contains_key(v.as_str()) {
            visit(&mut t, v);
        }
    }
    let circles: Vec<String> = t.sccs.iter().map(|s| s.join(" <-> ")).collect();
    assert!(circles.is_empty(), "modules that import each other:\n  {}", circles.join("\n  "));
}

/// Lengths of the functions in code lines (signature to closing brace).
fn function_lengths(code: &[String]) -> Vec<(usize, String, usize)> {
    let mut out = Vec::new();
    for (i, line) in code.iter().enumerate() {
        let t = line.trim_start();
        let t = t.strip_prefix("pub(crate) ").or_else(|| t.strip_prefix("pub ")).unwrap_or(t);
        let t = t.strip_prefix("const ").unwrap_or(t);
        let t = t.strip_prefix("async ").unwrap_or(t);
        let Some(rest) = t.strip_prefix("fn ") else { continue };
        let name: String = rest.chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect();
        let mut depth = 0i32;
        let mut opened = false;
        let mut end = None;
        'scan: for (j, l) in code.iter().enumerate().skip(i) {
            for c in l.chars() {
                match c {
                    '{' => {
                        depth += 1;
                        opened = true;
                    }
                    '}' => depth -= 1,
                    ';' if !opened && depth == 0 => break 'scan,
                    _ => {}
                }
                if opened && depth == 0 {
                    end = Some(j);
                    break 'scan;
                }
            }
        }
        if let Some(j) = end {
            out.push((j - i + 1, name, i + 1));
        }
    }
    out
}

#[test]
fn no_function_is_longer_than_120_lines() {
    let mut long = Vec::new();
    for m in modules() {
        for (n, name, line) in function_lengths(&m.code) {
            if n > MAX_FN_LINES {
                long.push(format!("{}:{line} `{name}`: {n} lines", m.path.display()));
            }
        }
    }
    assert!(long.is_empty(), "functions over {MAX_FN_LINES} lines:\n  {}", long.join("\n  "));
}

/// The checks above see what they claim to see: a known edge, a known function.
#[test]
fn the_layout_checks_read_the_source() {
    let g = graph();
    assert!(g["pipeline::unit"].iter().any(|m| m == "core"), "{:?}", g["pipeline::unit"]);
    assert!(g["core::model"].contains("thermo::balance"), "{:?}", g["core::model"]);
    let lens = function_lengths(&[
        "fn a() {".to_string(),
        "    let s = \"\";".to_string(),
        "    if x { y }".to_string(),
        "}".to_string(),
    ]);
    assert_eq!(lens, vec![(4, "a".to_string(), 1)]);
    assert_eq!(strip("let s = \"{\"; // }\nlet c = '{';"), "let s = \"\"; \nlet c = ' ';");
}
