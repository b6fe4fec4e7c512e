//! The architecture is a contract: modules depend on each other without cycles, each layer
//! only on the layers below it (DEVELOPERS.md, "Layout"), the library never prints, and
//! dataset names are spelled only in `io::names`. Read from the source text.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

/// Layers from the bottom up; a layer may use only layers of a lower rank.
const LAYERS: [(&str, u32); 10] = [
    ("config", 0),
    ("physics", 1),
    ("engine", 2),
    ("io", 3),
    ("reference", 4),
    ("runner", 4),
    ("analysis", 5),
    ("viz", 5),
    ("study", 6),
    ("cli", 7),
];

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

/// Module path of a source file: src/physics/kernel.rs → physics::kernel.
fn module_of(src: &Path, file: &Path) -> String {
    let rel = file.strip_prefix(src).unwrap().with_extension("");
    let mut parts: Vec<String> = rel.iter().map(|s| s.to_string_lossy().into()).collect();
    if parts.last().is_some_and(|p| p == "mod") {
        parts.pop();
    }
    parts.join("::")
}

/// Every module and the modules it names through `crate::…` paths.
fn graph() -> BTreeMap<String, (String, BTreeSet<String>)> {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    let texts: BTreeMap<String, String> = files
        .iter()
        .map(|f| (module_of(&src, f), std::fs::read_to_string(f).unwrap()))
        .collect();
    let mut g = BTreeMap::new();
    for (m, text) in &texts {
        let mut deps = BTreeSet::new();
        for (i, _) in text.match_indices("crate::") {
            let path: String = text[i + 7..]
                .chars()
                .take_while(|c| c.is_ascii_lowercase() || *c == '_' || *c == ':')
                .collect();
            let parts: Vec<&str> = path.split("::").filter(|p| !p.is_empty()).collect();
            for n in (1..=parts.len()).rev() {
                let cand = parts[..n].join("::");
                if texts.contains_key(&cand) {
                    if &cand != m {
                        deps.insert(cand);
                    }
                    break;
                }
            }
        }
        g.insert(m.clone(), (text.clone(), deps));
    }
    g
}

fn layer(m: &str) -> Option<u32> {
    let top = m.split("::").next().unwrap();
    LAYERS.iter().find(|(n, _)| *n == top).map(|&(_, r)| r)
}

#[test]
fn modules_form_no_cycle_and_respect_the_layers() {
    let g = graph();
    assert!(
        g.len() > 40 && g.contains_key("physics::kernel"),
        "source tree not found"
    );
    assert!(
        g["runner::driver"].1.contains("engine::step"),
        "dependencies not read"
    );
    // Layers: every dependency points to the same or a lower layer.
    for (m, (_, deps)) in &g {
        for d in deps {
            if let (Some(a), Some(b)) = (layer(m), layer(d)) {
                assert!(
                    b <= a,
                    "{m} (layer {a}) uses {d} (layer {b}), a higher layer"
                );
            }
        }
    }
    // Cycles: depth-first search over modules.
    fn visit<'a>(
        m: &'a str,
        g: &'a BTreeMap<String, (String, BTreeSet<String>)>,
        state: &mut BTreeMap<&'a str, u8>,
        stack: &mut Vec<&'a str>,
    ) {
        state.insert(m, 1);
        stack.push(m);
        for d in &g[m].1 {
            match state.get(d.as_str()) {
                Some(1) => panic!("dependency cycle: {:?} -> {d}", stack),
                Some(_) => {}
                None => visit(d, g, state, stack),
            }
        }
        stack.pop();
        state.insert(m, 2);
    }
    let mut state = BTreeMap::new();
    for m in g.keys() {
        if !state.contains_key(m.as_str()) {
            visit(m, &g, &mut state, &mut Vec::new());
        }
    }
}

#[test]
fn only_the_command_line_prints() {
    for (m, (text, _)) in graph() {
        if m.starts_with("cli") || m == "main" {
            continue;
        }
        for mac in ["println!", "eprintln!", "print!(", "eprint!("] {
            assert!(!text.contains(mac), "{m} prints ({mac})");
        }
    }
}

#[test]
fn dataset_names_are_spelled_only_in_io_names() {
    // The contract names of docs/formats.md, as string literals.
    let names = [
        "\"density\"",
        "\"pair_density\"",
        "\"wigner\"",
        "\"momentum_density\"",
        "\"current_density\"",
        "\"absorbed_left\"",
        "\"absorbed_right\"",
        "\"norm_right\"",
        "\"energy\"",
        // (`samples` alone is also a job key, spelled in config::job.)
        "\"samples_positive\"",
        "\"samples_negative\"",
        "\"particles_positive\"",
        "\"annihilation_before\"",
        "\"observables.h5\"",
        "\"reference.h5\"",
    ];
    for (m, (text, _)) in graph() {
        if m == "io::names" || m.starts_with("cli") {
            continue;
        }
        // Test modules inside a file may spell names (they check the contract).
        let body = text.split("#[cfg(test)]").next().unwrap();
        for n in names {
            assert!(!body.contains(n), "{m} spells the dataset name {n}");
        }
    }
}

#[test]
fn the_physics_layer_uses_no_mpi_hdf5_or_pictures() {
    for (m, (text, _)) in graph() {
        if !(m.starts_with("physics") || m.starts_with("config")) {
            continue;
        }
        // (Two reads remain below the engine: a tabulated potential's table file and the
        // machine's memory size, both while a job is validated.)
        for word in ["mpi::", "hdf5::", "plotters::", "rayon::ThreadPoolBuilder"] {
            assert!(!text.contains(word), "{m} uses {word}");
        }
    }
}
