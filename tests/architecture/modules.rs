//! The library's module graph at file level: one node per source file (a file is a module; a
//! `mod.rs` is its folder's module), one edge per file another file's code refers to.
//!
//! Edges come from `use` declarations and from paths in code (`crate::a::b`, `super::x`,
//! `self::y`, a child module's name, or a name a `use` brought in, such as `shift::estimate` after
//! `use crate::calibrate::shift`). A path is followed down to the file that defines its module;
//! when the next name is a `pub use` re-export of that module (a `mod.rs` facade such as
//! `pub use target::calibrate_target`), it is followed on to the file the name comes from, so
//! a caller of `crate::calibrate::calibrate_target` depends on `calibrate/target.rs`, not on
//! `calibrate/mod.rs`. A re-export is not a dependency of the file that re-exports, unless that
//! file's own code uses the name.
//!
//! Modules under `#[cfg(test)]` are left out: they are built only for the crate's unit tests and do
//! not shape the library's layering. `src/main.rs` is the binary's root: it depends on the library
//! and nothing depends on it, so it cannot close a circle and is left out too.

use super::lexer::{Token, blank, tokens};
use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::path::Path;

/// One source file of the library.
#[derive(Clone, Debug)]
pub struct SourceFile {
    /// Path relative to the crate root, with `/` separators (`src/pipeline/run.rs`).
    pub rel: String,
    /// Module path (`["pipeline", "run"]`; empty for `src/lib.rs`).
    pub module: Vec<String>,
    /// The file's text.
    pub text: String,
}

/// Where an edge was seen: line and the path as written.
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub struct Evidence {
    /// 1-based line in the referring file.
    pub line: usize,
    /// The path, segments joined by `::`.
    pub path: String,
}

/// The module graph: `edges[from][to]` = first place `from` refers to `to`.
#[derive(Clone, Debug, Default)]
pub struct ModuleGraph {
    /// Edges between files (relative paths), with the first evidence.
    pub edges: BTreeMap<String, BTreeMap<String, Evidence>>,
}

/// Module path of a file under `src/` (`None` for the binary's root).
pub fn module_of(rel_to_src: &str) -> Option<Vec<String>> {
    let stem = rel_to_src.strip_suffix(".rs")?;
    if stem == "main" {
        return None;
    }
    let mut parts: Vec<String> = stem.split('/').map(str::to_string).collect();
    if parts.last().is_some_and(|p| p == "mod" || p == "lib") {
        parts.pop();
    }
    Some(parts)
}

/// Reads every `.rs` file under `root/src`.
pub fn read_sources(root: &Path) -> Vec<SourceFile> {
    fn walk(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
        let mut entries: Vec<_> = std::fs::read_dir(dir)
            .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
            .map(|e| e.expect("directory entry").path())
            .collect();
        entries.sort();
        for p in entries {
            if p.is_dir() {
                walk(&p, out);
            } else if p.extension().is_some_and(|x| x == "rs") {
                out.push(p);
            }
        }
    }
    let src = root.join("src");
    let mut paths = Vec::new();
    walk(&src, &mut paths);
    paths
        .into_iter()
        .filter_map(|p| {
            let rel_src = p
                .strip_prefix(&src)
                .expect("under src")
                .to_string_lossy()
                .replace('\\', "/");
            let module = module_of(&rel_src)?;
            let text = std::fs::read_to_string(&p).unwrap_or_else(|e| panic!("{rel_src}: {e}"));
            Some(SourceFile {
                rel: format!("src/{rel_src}"),
                module,
                text,
            })
        })
        .collect()
}

/// One leaf of a `use` tree.
#[derive(Clone, Debug, PartialEq)]
struct UseLeaf {
    /// Segments as written (`super`, `crate`, names).
    path: Vec<String>,
    /// The name it brings into scope (`None` for a glob).
    alias: Option<String>,
    line: usize,
}

/// A `use` declaration: its leaves, whether it is `pub` (a re-export), and the module it sits in.
#[derive(Clone, Debug)]
struct UseDecl {
    leaves: Vec<UseLeaf>,
    public: bool,
    scope: Vec<String>,
}

/// A path written in code (outside `use`), with the module it sits in.
#[derive(Clone, Debug)]
struct CodePath {
    segments: Vec<String>,
    scope: Vec<String>,
    line: usize,
}

/// What one file says: its `use` declarations, the paths in its code, and the identifiers its code
/// mentions (to tell whether a re-exported name is also used).
#[derive(Clone, Debug, Default)]
struct Parsed {
    uses: Vec<UseDecl>,
    paths: Vec<CodePath>,
    code_idents: BTreeSet<String>,
}

fn is_ident_token(t: &str) -> bool {
    t.chars()
        .next()
        .is_some_and(|c| c.is_alphabetic() || c == '_')
}

/// Parses a use tree starting at `toks[*i]`, under `prefix`, into `out`.
fn parse_use_tree(toks: &[Token], i: &mut usize, prefix: &[String], out: &mut Vec<UseLeaf>) {
    let mut path = prefix.to_vec();
    let line = toks.get(*i).map_or(0, |t| t.line);
    if toks.get(*i).is_some_and(|t| t.text == "::") {
        *i += 1;
    }
    loop {
        let Some(t) = toks.get(*i) else { return };
        match t.text.as_str() {
            "{" => {
                *i += 1;
                loop {
                    match toks.get(*i).map(|t| t.text.as_str()) {
                        None => return,
                        Some("}") => {
                            *i += 1;
                            return;
                        }
                        Some(",") => *i += 1,
                        Some(_) => parse_use_tree(toks, i, &path, out),
                    }
                }
            }
            "*" => {
                *i += 1;
                out.push(UseLeaf {
                    path,
                    alias: None,
                    line,
                });
                return;
            }
            name if is_ident_token(name) => {
                path.push(name.to_string());
                *i += 1;
                if toks.get(*i).is_some_and(|t| t.text == "::") {
                    *i += 1;
                    continue;
                }
                let mut alias = name.to_string();
                if toks.get(*i).is_some_and(|t| t.text == "as") {
                    alias = toks.get(*i + 1).map_or(alias, |t| t.text.clone());
                    *i += 2;
                }
                if name == "self" {
                    path.pop();
                    if alias == "self" {
                        alias = path.last().cloned().unwrap_or_default();
                    }
                }
                out.push(UseLeaf {
                    path,
                    alias: Some(alias),
                    line,
                });
                return;
            }
            _ => return,
        }
    }
}

/// Index of the token after the block opened at `toks[open]` (`{`).
fn skip_block(toks: &[Token], open: usize) -> usize {
    let mut depth = 0usize;
    for (k, t) in toks.iter().enumerate().skip(open) {
        match t.text.as_str() {
            "{" => depth += 1,
            "}" => {
                depth -= 1;
                if depth == 0 {
                    return k + 1;
                }
            }
            _ => {}
        }
    }
    toks.len()
}

/// Whether `toks[at..]` starts with `# [ cfg ( test ) ]`.
fn is_cfg_test(toks: &[Token], at: usize) -> bool {
    let want = ["#", "[", "cfg", "(", "test", ")", "]"];
    toks.len() >= at + want.len()
        && want
            .iter()
            .zip(&toks[at..])
            .all(|(w, t)| t.text.as_str() == *w)
}

fn parse_file(file: &SourceFile) -> Parsed {
    let toks = tokens(&blank(&file.text));
    let mut parsed = Parsed::default();
    // Inline modules: (name, brace depth inside them).
    let mut inline: Vec<(String, usize)> = Vec::new();
    let mut depth = 0usize;
    let mut i = 0;
    while i < toks.len() {
        let scope: Vec<String> = file
            .module
            .iter()
            .cloned()
            .chain(inline.iter().map(|(n, _)| n.clone()))
            .collect();
        let t = toks[i].text.as_str();
        match t {
            "#" if is_cfg_test(&toks, i) => {
                // Skip the attributed item: up to its block or its `;`.
                let mut k = i + 7;
                while k < toks.len() && toks[k].text != "{" && toks[k].text != ";" {
                    k += 1;
                }
                i = if toks.get(k).is_some_and(|t| t.text == "{") {
                    skip_block(&toks, k)
                } else {
                    k + 1
                };
            }
            "{" => {
                depth += 1;
                i += 1;
            }
            "}" => {
                if inline.last().is_some_and(|(_, d)| *d == depth) {
                    inline.pop();
                }
                depth = depth.saturating_sub(1);
                i += 1;
            }
            "mod"
                if toks.get(i + 2).is_some_and(|t| t.text == "{")
                    && toks.get(i + 1).is_some_and(|t| is_ident_token(&t.text)) =>
            {
                inline.push((toks[i + 1].text.clone(), depth + 1));
                depth += 1;
                i += 3;
            }
            "use" => {
                let public = i >= 1
                    && (toks[i - 1].text == "pub"
                        || (toks[i - 1].text == ")"
                            && i >= 4
                            && toks[i - 4].text == "pub"
                            && toks[i - 3].text == "("));
                let mut k = i + 1;
                let mut leaves = Vec::new();
                parse_use_tree(&toks, &mut k, &[], &mut leaves);
                while k < toks.len() && toks[k].text != ";" {
                    k += 1;
                }
                parsed.uses.push(UseDecl {
                    leaves,
                    public,
                    scope,
                });
                i = k + 1;
            }
            name if is_ident_token(name) => {
                parsed.code_idents.insert(name.to_string());
                let starts_path = toks.get(i + 1).is_some_and(|t| t.text == "::")
                    && !(i >= 1 && toks[i - 1].text == "::");
                if starts_path {
                    let mut segments = vec![name.to_string()];
                    let mut k = i + 1;
                    while toks.get(k).is_some_and(|t| t.text == "::")
                        && toks.get(k + 1).is_some_and(|t| is_ident_token(&t.text))
                    {
                        segments.push(toks[k + 1].text.clone());
                        parsed.code_idents.insert(toks[k + 1].text.clone());
                        k += 2;
                    }
                    parsed.paths.push(CodePath {
                        segments,
                        scope,
                        line: toks[i].line,
                    });
                    i = k;
                } else {
                    i += 1;
                }
            }
            _ => i += 1,
        }
    }
    parsed
}

/// Resolves the leading keywords of a path written in module `scope` to an absolute module path.
/// `None` for a path that does not start inside this crate (another crate, a local type).
fn absolute(
    segments: &[String],
    scope: &[String],
    modules: &BTreeSet<Vec<String>>,
    aliases: &HashMap<String, Vec<String>>,
) -> Option<Vec<String>> {
    let first = segments.first()?;
    match first.as_str() {
        "crate" | "tidemark" => Some(segments[1..].to_vec()),
        "self" => Some(scope.iter().chain(&segments[1..]).cloned().collect()),
        "super" => {
            let mut base = scope.to_vec();
            let mut k = 0;
            while segments.get(k).is_some_and(|s| s == "super") {
                base.pop()?;
                k += 1;
            }
            Some(
                base.into_iter()
                    .chain(segments[k..].iter().cloned())
                    .collect(),
            )
        }
        name => {
            let mut child = scope.to_vec();
            child.push(name.to_string());
            if modules.contains(&child) {
                Some(
                    child
                        .into_iter()
                        .chain(segments[1..].iter().cloned())
                        .collect(),
                )
            } else {
                aliases
                    .get(name)
                    .map(|base| base.iter().chain(&segments[1..]).cloned().collect())
            }
        }
    }
}

/// Builds the module graph of the given files.
pub fn graph(files: &[SourceFile]) -> ModuleGraph {
    let modules: BTreeSet<Vec<String>> = files.iter().map(|f| f.module.clone()).collect();
    let file_of: HashMap<Vec<String>, String> = files
        .iter()
        .map(|f| (f.module.clone(), f.rel.clone()))
        .collect();
    let parsed: Vec<Parsed> = files.iter().map(parse_file).collect();

    // Per file: names brought in by `use` (absolute targets), and the re-exports it offers.
    let no_aliases = HashMap::new();
    let mut aliases: Vec<HashMap<String, Vec<String>>> = Vec::new();
    let mut reexports: HashMap<Vec<String>, HashMap<String, Vec<String>>> = HashMap::new();
    for (f, p) in files.iter().zip(&parsed) {
        let mut a = HashMap::new();
        for u in &p.uses {
            for leaf in &u.leaves {
                let (Some(alias), Some(abs)) = (
                    &leaf.alias,
                    absolute(&leaf.path, &u.scope, &modules, &no_aliases),
                ) else {
                    continue;
                };
                a.insert(alias.clone(), abs.clone());
                if u.public {
                    reexports
                        .entry(f.module.clone())
                        .or_default()
                        .insert(alias.clone(), abs);
                }
            }
        }
        aliases.push(a);
    }

    // Follows an absolute path to the file that defines what it names.
    let resolve = |abs: &[String]| -> Option<String> {
        let mut path = abs.to_vec();
        for _ in 0..16 {
            let p = (0..=path.len())
                .rev()
                .find(|&p| modules.contains(&path[..p]))?;
            let module = path[..p].to_vec();
            let next = path.get(p);
            match next.and_then(|n| reexports.get(&module).and_then(|r| r.get(n))) {
                Some(target) if *target != path[..=p] => {
                    path = target.iter().chain(&path[p + 1..]).cloned().collect();
                }
                _ => return file_of.get(&module).cloned(),
            }
        }
        None
    };

    let mut g = ModuleGraph::default();
    let mut add = |from: &str, to: Option<String>, ev: Evidence| {
        if let Some(to) = to.filter(|t| t != from) {
            let e = g.edges.entry(from.to_string()).or_default();
            let slot = e.entry(to).or_insert_with(|| ev.clone());
            if ev < *slot {
                *slot = ev;
            }
        }
    };
    for ((f, p), a) in files.iter().zip(&parsed).zip(&aliases) {
        for u in &p.uses {
            for leaf in &u.leaves {
                // A re-export counts only when the file's own code uses the name.
                if u.public
                    && leaf
                        .alias
                        .as_ref()
                        .is_none_or(|n| !p.code_idents.contains(n))
                {
                    continue;
                }
                if let Some(abs) = absolute(&leaf.path, &u.scope, &modules, a) {
                    let ev = Evidence {
                        line: leaf.line,
                        path: leaf.path.join("::"),
                    };
                    add(&f.rel, resolve(&abs), ev);
                }
            }
        }
        for cp in &p.paths {
            if let Some(abs) = absolute(&cp.segments, &cp.scope, &modules, a) {
                let ev = Evidence {
                    line: cp.line,
                    path: cp.segments.join("::"),
                };
                add(&f.rel, resolve(&abs), ev);
            }
        }
    }
    g
}

#[cfg(test)]
fn file(rel: &str, text: &str) -> SourceFile {
    SourceFile {
        rel: rel.into(),
        module: module_of(rel.strip_prefix("src/").unwrap()).unwrap(),
        text: text.into(),
    }
}

#[test]
fn paths_resolve_through_aliases_and_reexports() {
    let files = vec![
        file("src/lib.rs", "pub mod a; pub mod b;"),
        file(
            "src/a/mod.rs",
            "pub mod x; pub mod y; pub use x::Thing; pub use y::Other;\n\
             fn f() -> Other { Other }",
        ),
        file(
            "src/a/x.rs",
            "use super::Shared; pub struct Thing;\n#[cfg(test)]\nmod tests { use crate::b::*; }",
        ),
        file("src/a/y.rs", "pub struct Other; pub struct Shared;"),
        file(
            "src/b.rs",
            "use crate::a::{self, Thing};\nfn g() { let _ = a::y::Shared; }\n\
             // use crate::z;\nconst S: &str = \"crate::a::nothing\";",
        ),
    ];
    let g = graph(&files);
    let out = |f: &str| -> Vec<String> {
        g.edges
            .get(f)
            .map(|e| e.keys().cloned().collect())
            .unwrap_or_default()
    };
    // The facade's own code uses `Other`, so `a/mod.rs` depends on `a/y.rs`; `Thing` is only
    // re-exported.
    assert_eq!(out("src/a/mod.rs"), vec!["src/a/y.rs"]);
    // `super::Shared` is not re-exported by the facade: the edge stays on `a/mod.rs`.
    assert_eq!(out("src/a/x.rs"), vec!["src/a/mod.rs"]);
    // `Thing` through the facade lands on x.rs; `a::y::Shared` through the alias on y.rs; the
    // module path in a string literal on the facade.
    assert_eq!(
        out("src/b.rs"),
        vec!["src/a/mod.rs", "src/a/x.rs", "src/a/y.rs"]
    );
    assert_eq!(g.edges["src/b.rs"]["src/a/y.rs"].line, 2);
    // Test modules are left out: x.rs's tests use b, but x.rs does not depend on it.
    assert!(!out("src/a/x.rs").contains(&"src/b.rs".to_string()));
    assert!(out("src/lib.rs").is_empty());
}
