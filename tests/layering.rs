//! The layers run one way: no module imports a module of a higher layer, and no two
//! modules import each other. A grep over `crate::` paths in src/ (use lines and inline
//! paths alike) is enough to hold it.

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// Every top-level module with its layer, lowest first. A module may use modules of a
/// lower layer or of its own; `term` is part of `layout` (re-exported at the top).
const LAYERS: &[(&str, u32)] = &[
    ("error", 0),
    ("dist", 0),
    ("progress", 0),
    ("spec", 1),
    ("layout", 2),
    ("term", 2),
    ("ems", 3),
    ("errorterm", 4),
    ("balanced", 4),
    ("planning", 5),
    ("unbalanced", 5),
    ("goal", 6),
    ("variant", 6),
    ("engine", 6),
    ("findings", 7),
    ("repair", 7),
    ("check", 8),
    ("analyze", 8),
    ("simulate", 8),
    ("compare", 9),
    ("search", 9),
    ("report", 10),
    ("render", 11),
    ("cli", 12),
    ("lib", 13),
    ("main", 13),
];

fn layer(module: &str) -> u32 {
    LAYERS
        .iter()
        .find(|(m, _)| *m == module)
        .map(|(_, l)| *l)
        .unwrap_or_else(|| panic!("module {module} has no layer in tests/layering.rs: add it"))
}

/// (module, module it uses) for every `crate::name` in src/.
fn uses() -> BTreeMap<String, BTreeSet<String>> {
    fn walk(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
        for entry in std::fs::read_dir(dir).expect("src/ is readable") {
            let path = entry.expect("entry").path();
            if path.is_dir() {
                walk(&path, out);
            } else if path.extension().is_some_and(|e| e == "rs") {
                out.push(path);
            }
        }
    }
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    walk(&src, &mut files);
    let mut out: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
    for file in files {
        let rel = file.strip_prefix(&src).expect("under src");
        let top = rel
            .components()
            .next()
            .and_then(|c| c.as_os_str().to_str())
            .expect("a name")
            .trim_end_matches(".rs")
            .to_string();
        let text = std::fs::read_to_string(&file).expect("readable");
        for (at, _) in text.match_indices("crate::") {
            let name: String = text[at + 7..]
                .chars()
                .take_while(|c| c.is_ascii_lowercase() || *c == '_')
                .collect();
            if !name.is_empty() && name != top {
                out.entry(top.clone()).or_default().insert(name);
            }
        }
    }
    out
}

#[test]
fn no_module_uses_a_higher_layer() {
    let mut wrong = Vec::new();
    for (module, used) in uses() {
        for u in used {
            if layer(&u) > layer(&module) {
                wrong.push(format!(
                    "{module} (layer {}) uses {u} (layer {})",
                    layer(&module),
                    layer(&u)
                ));
            }
        }
    }
    assert!(wrong.is_empty(), "upward imports:\n{}", wrong.join("\n"));
}

#[test]
fn no_two_modules_use_each_other() {
    let all = uses();
    let mut cycles = Vec::new();
    for (a, used) in &all {
        for b in used {
            let back = all.get(b).is_some_and(|u| u.contains(a));
            let same = (a == "layout" && b == "term") || (a == "term" && b == "layout");
            if back && a < b && !same {
                cycles.push(format!("{a} <-> {b}"));
            }
        }
    }
    assert!(cycles.is_empty(), "import cycles: {cycles:?}");
}

#[test]
fn only_render_and_cli_use_render() {
    let all = uses();
    let users: Vec<&String> = all
        .iter()
        .filter(|(m, used)| {
            used.contains("render") && !["cli", "lib", "main"].contains(&m.as_str())
        })
        .map(|(m, _)| m)
        .collect();
    assert!(users.is_empty(), "modules that format: {users:?}");
}
