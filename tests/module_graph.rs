//! No import cycles: reads every file under `src/` (the library's modules), collects the
//! modules each one imports, and fails on any cycle, naming it.
//!
//! Granularity (DEVELOPERS.md "Module graph"): every file is a module (`a/mod.rs` is
//! module `a`, `lib.rs` the crate root), checked as it is and collapsed to its top-level
//! module (`terrain::slope` → `terrain`). An import is a `use` tree or a path starting at
//! `crate::`, `super::`, `self::` or a child module's name, resolved to the longest
//! module prefix it names. A module's own descendants are part of it: its declarations
//! and re-exports of them (`mod x; pub use x::Y;`) are not imports, so a child may use
//! what its parent defines; siblings, cousins and unrelated modules may not import each
//! other both ways. Code under `#[cfg(test)]` is left out: a test may reach up to the
//! entry point it tests. `main.rs` (the binary) is left out.

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

type Module = Vec<String>;

/// Every library module (path segments) and its source file.
fn modules(src: &Path) -> BTreeMap<Module, String> {
    let mut out = BTreeMap::new();
    let mut stack = vec![src.to_path_buf()];
    while let Some(dir) = stack.pop() {
        for entry in std::fs::read_dir(&dir).expect("src/ is readable") {
            let path = entry.expect("directory entry").path();
            if path.is_dir() {
                stack.push(path);
                continue;
            }
            if path.extension().and_then(|e| e.to_str()) != Some("rs") {
                continue;
            }
            let rel = path.strip_prefix(src).expect("under src/");
            let mut segs: Module = rel
                .with_extension("")
                .iter()
                .map(|s| s.to_string_lossy().into_owned())
                .collect();
            if segs.last().map(String::as_str) == Some("mod") {
                segs.pop();
            }
            if segs == ["main"] {
                continue;
            }
            if segs == ["lib"] {
                segs.clear();
            }
            let text = std::fs::read_to_string(&path).expect("source file is readable");
            out.insert(segs, text);
        }
    }
    out
}

#[derive(Clone, Debug, PartialEq)]
enum Tok {
    Ident(String),
    Path, // ::
    Punct(char),
}

/// Identifiers, `::` and single punctuation of `text`, without comments, strings and
/// character literals.
fn tokens(text: &str) -> Vec<Tok> {
    let b: Vec<char> = text.chars().collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < b.len() {
        let c = b[i];
        if c == '/' && b.get(i + 1) == Some(&'/') {
            while i < b.len() && b[i] != '\n' {
                i += 1;
            }
        } else if c == '/' && b.get(i + 1) == Some(&'*') {
            let mut depth = 0;
            while i < b.len() {
                if b[i] == '/' && b.get(i + 1) == Some(&'*') {
                    depth += 1;
                    i += 2;
                } else if b[i] == '*' && b.get(i + 1) == Some(&'/') {
                    depth -= 1;
                    i += 2;
                    if depth == 0 {
                        break;
                    }
                } else {
                    i += 1;
                }
            }
        } else if c == 'r' && (b.get(i + 1) == Some(&'"') || b.get(i + 1) == Some(&'#')) {
            // Raw string r"..." or r#"..."#.
            let mut j = i + 1;
            let mut hashes = 0;
            while b.get(j) == Some(&'#') {
                hashes += 1;
                j += 1;
            }
            if b.get(j) != Some(&'"') {
                out.push(Tok::Ident("r".into()));
                i += 1;
                continue;
            }
            j += 1;
            loop {
                if j >= b.len() {
                    break;
                }
                if b[j] == '"' && (0..hashes).all(|k| b.get(j + 1 + k) == Some(&'#')) {
                    j += 1 + hashes;
                    break;
                }
                j += 1;
            }
            i = j;
        } else if c == '"' {
            i += 1;
            while i < b.len() && b[i] != '"' {
                if b[i] == '\\' {
                    i += 1;
                }
                i += 1;
            }
            i += 1;
        } else if c == '\'' {
            // A char literal ('a', '\n', '\u{..}') or a lifetime ('a).
            if b.get(i + 2) == Some(&'\'') {
                i += 3;
            } else if b.get(i + 1) == Some(&'\\') {
                i += 2;
                while i < b.len() && b[i] != '\'' {
                    i += 1;
                }
                i += 1;
            } else {
                i += 1;
            }
        } else if c.is_alphabetic() || c == '_' {
            let s = i;
            while i < b.len() && (b[i].is_alphanumeric() || b[i] == '_') {
                i += 1;
            }
            out.push(Tok::Ident(b[s..i].iter().collect()));
        } else if c == ':' && b.get(i + 1) == Some(&':') {
            out.push(Tok::Path);
            i += 2;
        } else {
            if !c.is_whitespace() {
                out.push(Tok::Punct(c));
            }
            i += 1;
        }
    }
    out
}

/// `toks` without the items under `#[cfg(test)]`, and the names of child modules
/// declared under it (`#[cfg(test)] mod support;`).
fn without_tests(toks: &[Tok]) -> (Vec<Tok>, Vec<String>) {
    let mut out = Vec::new();
    let mut test_mods = Vec::new();
    let mut i = 0;
    let is = |i: usize, t: &Tok| toks.get(i) == Some(t);
    while i < toks.len() {
        let cfg_test = is(i, &Tok::Punct('#'))
            && is(i + 1, &Tok::Punct('['))
            && is(i + 2, &Tok::Ident("cfg".into()))
            && is(i + 3, &Tok::Punct('('))
            && is(i + 4, &Tok::Ident("test".into()))
            && is(i + 5, &Tok::Punct(')'))
            && is(i + 6, &Tok::Punct(']'));
        if !cfg_test {
            out.push(toks[i].clone());
            i += 1;
            continue;
        }
        i += 7;
        // Skip the item: up to a `;` at depth 0, or through its first balanced `{}`.
        let mut depth = 0i32;
        let start = i;
        while i < toks.len() {
            match &toks[i] {
                Tok::Punct('{') => depth += 1,
                Tok::Punct('}') => {
                    depth -= 1;
                    if depth == 0 {
                        i += 1;
                        break;
                    }
                }
                Tok::Punct(';') if depth == 0 => {
                    i += 1;
                    break;
                }
                _ => {}
            }
            i += 1;
        }
        let item = &toks[start..i];
        if let Some(k) = item.iter().position(|t| *t == Tok::Ident("mod".into())) {
            if let (Some(Tok::Ident(name)), Some(Tok::Punct(';'))) =
                (item.get(k + 1), item.get(k + 2))
            {
                test_mods.push(name.clone());
            }
        }
    }
    (out, test_mods)
}

/// Full paths of a `use` tree starting at `toks[i]` (after `use`); returns them and the
/// index past the tree.
fn use_tree(toks: &[Tok], mut i: usize, prefix: &[String], out: &mut Vec<Vec<String>>) -> usize {
    let mut path: Vec<String> = prefix.to_vec();
    loop {
        match toks.get(i) {
            Some(Tok::Ident(s)) => {
                path.push(s.clone());
                i += 1;
                if toks.get(i) == Some(&Tok::Path) {
                    i += 1;
                    continue;
                }
                if toks.get(i) == Some(&Tok::Ident("as".into())) {
                    i += 2;
                }
                out.push(path);
                return i;
            }
            Some(Tok::Punct('{')) => {
                i += 1;
                loop {
                    match toks.get(i) {
                        Some(Tok::Punct('}')) => return i + 1,
                        Some(Tok::Punct(',')) => i += 1,
                        None => return i,
                        _ => i = use_tree(toks, i, &path, out),
                    }
                }
            }
            Some(Tok::Punct('*')) => {
                out.push(path);
                return i + 1;
            }
            _ => {
                out.push(path);
                return i;
            }
        }
    }
}

/// The module `path` (as written in module `m`) names: the longest known module prefix
/// after resolving `crate`, `super` and `self`. `None` for paths into other crates.
fn resolve(
    m: &[String],
    path: &[String],
    known: &BTreeSet<Module>,
    in_use: bool,
) -> Option<Module> {
    let mut base: Module;
    let mut rest = path;
    match path.first().map(String::as_str) {
        Some("crate") => {
            base = Vec::new();
            rest = &path[1..];
        }
        Some("self") => {
            base = m.to_vec();
            rest = &path[1..];
        }
        Some("super") => {
            base = m.to_vec();
            while rest.first().map(String::as_str) == Some("super") {
                base.pop()?;
                rest = &rest[1..];
            }
        }
        Some(first) if in_use => {
            // `use child::x` in a module with that child (2018 edition paths).
            let mut child = m.to_vec();
            child.push(first.to_string());
            if !known.contains(&child) {
                return None;
            }
            base = m.to_vec();
        }
        _ => return None,
    }
    let mut best = base.clone();
    for seg in rest {
        base.push(seg.clone());
        if known.contains(&base) {
            best = base.clone();
        }
    }
    Some(best)
}

/// Every module's imports (itself left out).
fn imports(mods: &BTreeMap<Module, String>) -> BTreeMap<Module, BTreeSet<Module>> {
    let mut tests_only: BTreeSet<Module> = BTreeSet::new();
    let mut prod: BTreeMap<Module, Vec<Tok>> = BTreeMap::new();
    for (m, text) in mods {
        let (toks, test_mods) = without_tests(&tokens(text));
        for t in test_mods {
            let mut c = m.clone();
            c.push(t);
            tests_only.insert(c);
        }
        prod.insert(m.clone(), toks);
    }
    // A test-only module's descendants are test-only too.
    let known: BTreeSet<Module> = mods
        .keys()
        .filter(|k| !tests_only.iter().any(|t| k.starts_with(t)))
        .cloned()
        .collect();
    let mut graph = BTreeMap::new();
    for m in &known {
        let toks = &prod[m];
        let mut paths: Vec<(Vec<String>, bool)> = Vec::new();
        let mut i = 0;
        while i < toks.len() {
            if toks[i] == Tok::Ident("use".into()) {
                let mut found = Vec::new();
                i = use_tree(toks, i + 1, &[], &mut found);
                paths.extend(found.into_iter().map(|p| (p, true)));
                continue;
            }
            if let Tok::Ident(s) = &toks[i] {
                let mut child = m.clone();
                child.push(s.clone());
                let root =
                    matches!(s.as_str(), "crate" | "super" | "self") || known.contains(&child);
                let after_colons = i > 0 && toks[i - 1] == Tok::Path;
                if root && !after_colons && toks.get(i + 1) == Some(&Tok::Path) {
                    let mut p = vec![s.clone()];
                    let mut j = i + 1;
                    while toks.get(j) == Some(&Tok::Path) {
                        match toks.get(j + 1) {
                            Some(Tok::Ident(n)) => {
                                p.push(n.clone());
                                j += 2;
                            }
                            _ => break,
                        }
                    }
                    let child_path = !matches!(s.as_str(), "crate" | "super" | "self");
                    paths.push((p, child_path));
                    i = j;
                    continue;
                }
            }
            i += 1;
        }
        let targets: BTreeSet<Module> = paths
            .iter()
            .filter_map(|(p, in_use)| resolve(m, p, &known, *in_use))
            .filter(|t| !t.starts_with(m) && known.contains(t))
            .collect();
        graph.insert(m.clone(), targets);
    }
    graph
}

fn name(m: &Module) -> String {
    if m.is_empty() {
        "crate".into()
    } else {
        m.join("::")
    }
}

/// One cycle of `graph`, as the list of its modules from the first back to it, if any.
fn find_cycle<N: Ord + Clone>(graph: &BTreeMap<N, BTreeSet<N>>) -> Option<Vec<N>> {
    // Depth-first search with colours: 0 unseen, 1 on the stack, 2 done.
    fn visit<N: Ord + Clone>(
        n: &N,
        graph: &BTreeMap<N, BTreeSet<N>>,
        colour: &mut BTreeMap<N, u8>,
        stack: &mut Vec<N>,
    ) -> Option<Vec<N>> {
        colour.insert(n.clone(), 1);
        stack.push(n.clone());
        for t in graph.get(n).into_iter().flatten() {
            match colour.get(t).copied().unwrap_or(0) {
                1 => {
                    let k = stack.iter().position(|s| s == t).expect("on the stack");
                    let mut cycle = stack[k..].to_vec();
                    cycle.push(t.clone());
                    return Some(cycle);
                }
                0 => {
                    if let Some(c) = visit(t, graph, colour, stack) {
                        return Some(c);
                    }
                }
                _ => {}
            }
        }
        stack.pop();
        colour.insert(n.clone(), 2);
        None
    }
    let mut colour = BTreeMap::new();
    for n in graph.keys() {
        if colour.get(n).copied().unwrap_or(0) == 0 {
            if let Some(c) = visit(n, graph, &mut colour, &mut Vec::new()) {
                return Some(c);
            }
        }
    }
    None
}

/// Every cycle found by breaking one edge of each in turn (at most 100).
fn all_cycles<N: Ord + Clone>(mut graph: BTreeMap<N, BTreeSet<N>>) -> Vec<Vec<N>> {
    let mut out = Vec::new();
    while let Some(c) = find_cycle(&graph) {
        if let Some(t) = graph.get_mut(&c[0]) {
            t.remove(&c[1]);
        }
        out.push(c);
        if out.len() >= 100 {
            break;
        }
    }
    out
}

fn graph() -> BTreeMap<Module, BTreeSet<Module>> {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    imports(&modules(&src))
}

#[test]
fn no_module_imports_a_module_that_imports_it_back() {
    let cycles: Vec<String> = all_cycles(graph())
        .iter()
        .map(|c| c.iter().map(name).collect::<Vec<_>>().join(" → "))
        .collect();
    assert!(
        cycles.is_empty(),
        "import cycles between modules:\n  {}",
        cycles.join("\n  ")
    );
}

#[test]
fn no_top_level_module_imports_one_that_imports_it_back() {
    let mut top: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
    for (m, targets) in graph() {
        let Some(a) = m.first() else { continue };
        for t in targets {
            if let Some(b) = t.first() {
                if b != a {
                    top.entry(a.clone()).or_default().insert(b.clone());
                }
            }
        }
    }
    let cycles: Vec<String> = all_cycles(top).iter().map(|c| c.join(" → ")).collect();
    assert!(
        cycles.is_empty(),
        "import cycles between top-level modules:\n  {}",
        cycles.join("\n  ")
    );
}

#[test]
fn the_checker_sees_cycles_and_their_forms() {
    // A small crate of its own: `a` imports `b` through a use group, `b` reaches `a`
    // through `super::`, `c` only in test code; `d` re-exports its child `e`, which
    // uses its parent.
    let mut mods = BTreeMap::new();
    mods.insert(
        vec![],
        "pub mod a; pub mod b; pub mod c; pub mod d;".to_string(),
    );
    mods.insert(
        vec!["a".to_string()],
        "use crate::{b::{X, Y as Z}, c};".to_string(),
    );
    mods.insert(
        vec!["b".to_string()],
        "fn f() { super::a::g(); } // crate::c::h\n".to_string(),
    );
    mods.insert(
        vec!["c".to_string()],
        "const S: &str = \"crate::a::x\";\n#[cfg(test)]\nmod tests { use crate::a; }\n".to_string(),
    );
    mods.insert(
        vec!["d".to_string()],
        "pub mod e;\npub use e::T;\n".to_string(),
    );
    mods.insert(
        vec!["d".to_string(), "e".to_string()],
        "use super::U;".to_string(),
    );
    let g = imports(&mods);
    let m = |s: &str| -> Module { s.split("::").map(String::from).collect() };
    assert_eq!(g[&m("a")], [m("b"), m("c")].into_iter().collect());
    assert_eq!(g[&m("b")], [m("a")].into_iter().collect());
    assert!(g[&m("c")].is_empty(), "{:?}", g[&m("c")]);
    // A parent's re-exports of its children are part of it, not imports.
    assert!(g[&m("d")].is_empty(), "{:?}", g[&m("d")]);
    assert_eq!(g[&m("d::e")], [m("d")].into_iter().collect());
    let c = find_cycle(&g).expect("a ↔ b");
    assert_eq!(c.first(), c.last());
}
