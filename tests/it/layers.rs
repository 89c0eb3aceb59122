//! One-way layers (common practice: a module graph without cycles): every `crate::` and
//! `super::` path in src/ is read, and the graph of modules they draw, at the depth of
//! the crate's top-level modules and one level below, must have no cycle.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// `a::b` for src/a/b.rs or src/a/b/mod.rs; "" for the crate roots.
fn module_of(src: &Path, file: &Path) -> String {
    let rel = file.strip_prefix(src).unwrap().with_extension("");
    let mut parts: Vec<String> = rel
        .components()
        .map(|c| c.as_os_str().to_string_lossy().into_owned())
        .collect();
    if parts.last().is_some_and(|p| p == "mod") {
        parts.pop();
    }
    if parts == ["lib"] || parts == ["main"] {
        return String::new();
    }
    parts.join("::")
}

/// Code without comments and without its unit tests.
fn code(text: &str) -> String {
    let text = text.split("#[cfg(test)]").next().unwrap();
    text.lines()
        .map(|l| l.split("//").next().unwrap())
        .collect::<Vec<_>>()
        .join("\n")
}

/// Module paths named after `prefix` (identifier segments joined by `::`).
fn paths_after(text: &str, prefix: &str) -> Vec<Vec<String>> {
    let mut out = Vec::new();
    for (i, _) in text.match_indices(prefix) {
        let before = text[..i].chars().last();
        if before.is_some_and(|c| c.is_alphanumeric() || c == '_') {
            continue;
        }
        let rest = &text[i + prefix.len()..];
        let mut segs = Vec::new();
        for seg in rest.split("::") {
            let ident: String = seg
                .chars()
                .take_while(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || *c == '_')
                .collect();
            if ident.is_empty() {
                break;
            }
            let whole = ident.len() == seg.len();
            segs.push(ident);
            if !whole {
                break;
            }
        }
        out.push(segs);
    }
    out
}

fn truncate(m: &str, depth: usize) -> String {
    m.split("::").take(depth).collect::<Vec<_>>().join("::")
}

fn edges(depth: usize) -> BTreeMap<String, BTreeSet<String>> {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    let texts: BTreeMap<String, String> = files
        .iter()
        .map(|f| {
            (
                module_of(&src, f),
                code(&std::fs::read_to_string(f).unwrap()),
            )
        })
        .collect();
    let deepest = |segs: &[String]| -> Option<String> {
        (1..=segs.len())
            .rev()
            .map(|i| segs[..i].join("::"))
            .find(|m| texts.contains_key(m))
    };
    let mut g: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
    for (m, text) in &texts {
        if m.is_empty() {
            continue;
        }
        let from = truncate(m, depth);
        let parent: Vec<String> = m.split("::").map(str::to_string).collect();
        let parent = &parent[..parent.len() - 1];
        let mut targets: Vec<String> = paths_after(text, "crate::")
            .iter()
            .filter_map(|s| deepest(s))
            .collect();
        for s in paths_after(text, "super::") {
            let mut full = parent.to_vec();
            full.extend(s);
            if let Some(t) = deepest(&full) {
                targets.push(t);
            }
        }
        for t in targets {
            let to = truncate(&t, depth);
            let nested =
                to.starts_with(&format!("{from}::")) || from.starts_with(&format!("{to}::"));
            if !to.is_empty() && to != from && !nested {
                g.entry(from.clone()).or_default().insert(to);
            }
        }
    }
    g
}

/// A cycle through `start`, if any (depth-first search).
fn cycle(g: &BTreeMap<String, BTreeSet<String>>) -> Option<Vec<String>> {
    fn visit(
        g: &BTreeMap<String, BTreeSet<String>>,
        v: &str,
        path: &mut Vec<String>,
        done: &mut BTreeSet<String>,
    ) -> Option<Vec<String>> {
        if let Some(i) = path.iter().position(|p| p == v) {
            return Some(path[i..].to_vec());
        }
        if done.contains(v) {
            return None;
        }
        path.push(v.to_string());
        for w in g.get(v).into_iter().flatten() {
            if let Some(c) = visit(g, w, path, done) {
                return Some(c);
            }
        }
        path.pop();
        done.insert(v.to_string());
        None
    }
    let mut done = BTreeSet::new();
    for v in g.keys() {
        if let Some(c) = visit(g, v, &mut Vec::new(), &mut done) {
            return Some(c);
        }
    }
    None
}

#[test]
fn modules_form_one_way_layers() {
    for depth in [1, 2, 3] {
        let g = edges(depth);
        assert!(g.len() > 5, "the scan found the modules");
        if let Some(c) = cycle(&g) {
            panic!("import cycle at depth {depth}: {}", c.join(" -> "));
        }
    }
}
