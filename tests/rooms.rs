//! The module map's arrows, enforced: a room may use only the rooms the
//! table below allows (DEVELOPERS.md draws the same map). The check reads
//! every `crate::` path in the library's code outside its unit-test
//! modules; tests may reach any room for fixtures.

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// Each room and the rooms it may use, bottom up.
const ROOMS: &[(&str, &[&str])] = &[
    ("ascii", &[]),
    ("bus", &["ascii"]),
    ("config", &[]),
    ("adapter", &["ascii", "bus", "config"]),
    ("electrical", &["ascii", "bus"]),
    ("record", &["ascii", "bus"]),
    ("report", &["ascii", "bus", "record"]),
    ("smbus", &["ascii", "bus"]),
    ("regmap", &["ascii"]),
    ("sim", &["ascii", "bus", "config", "adapter", "smbus", "regmap"]),
    ("player", &["ascii", "bus", "adapter", "record"]),
    ("view", &["ascii", "bus", "adapter", "record"]),
    ("hal", &["ascii", "bus", "adapter", "record", "player"]),
    ("serve", &["ascii", "bus", "config", "adapter", "sim", "regmap"]),
    ("trace", &["ascii", "bus", "adapter", "record", "player", "smbus"]),
    ("tui", &["ascii", "bus", "adapter", "record", "player", "view", "trace"]),
    ("capture", &["ascii", "bus", "electrical", "record"]),
    ("script", &["ascii", "bus", "adapter", "electrical", "record", "report", "smbus", "regmap", "player", "view"]),
    (
        "cli",
        &[
            "ascii",
            "bus",
            "config",
            "adapter",
            "electrical",
            "record",
            "report",
            "smbus",
            "regmap",
            "sim",
            "player",
            "view",
            "hal",
            "serve",
            "trace",
            "tui",
            "capture",
            "script",
        ],
    ),
];

/// The room a source file belongs to: its folder under src/, or its stem
/// for a file directly in src/.
fn room_of(rel: &Path) -> String {
    let mut parts = rel.components().map(|c| c.as_os_str().to_string_lossy().into_owned());
    let first = parts.next().unwrap_or_default();
    first.strip_suffix(".rs").map(str::to_string).unwrap_or(first)
}

/// The code of a file without its unit-test module (by convention the
/// last item, `#[cfg(test)] mod tests`) and without comments.
fn code_of(text: &str) -> String {
    let mut out = String::new();
    let mut lines = text.lines().peekable();
    while let Some(line) = lines.next() {
        let t = line.trim_start();
        if t.starts_with("#[cfg(test)]") && lines.peek().is_some_and(|n| n.trim_start().starts_with("mod tests")) {
            break;
        }
        if t.starts_with("//") {
            continue;
        }
        out.push_str(line.split(" //").next().unwrap_or_default());
        out.push('\n');
    }
    out
}

/// The rooms a piece of code names through `crate::ROOM`.
fn uses(code: &str) -> BTreeSet<String> {
    let mut found = BTreeSet::new();
    for (i, _) in code.match_indices("crate::") {
        let before = code[..i].chars().next_back();
        if before.is_some_and(|c| c.is_alphanumeric() || c == '_') {
            continue; // `buscue_crate::` or the like, not our crate
        }
        let rest = &code[i + "crate::".len()..];
        let name: String = rest.chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect();
        if !name.is_empty() {
            found.insert(name);
        }
    }
    found
}

fn walk(dir: &Path, files: &mut Vec<std::path::PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            walk(&p, files);
        } else if p.extension().is_some_and(|x| x == "rs") {
            files.push(p);
        }
    }
}

#[test]
fn no_room_uses_a_room_above_it() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let allowed: BTreeMap<&str, &[&str]> = ROOMS.iter().copied().collect();
    let mut files = Vec::new();
    walk(&src, &mut files);
    let mut wrong = Vec::new();
    let mut seen_rooms = BTreeSet::new();
    for f in &files {
        let rel = f.strip_prefix(&src).unwrap();
        let room = room_of(rel);
        if room == "lib" || room == "main" {
            continue; // the crate root and the binary's shim declare rooms, they use none
        }
        seen_rooms.insert(room.clone());
        let Some(ok) = allowed.get(room.as_str()) else {
            wrong.push(format!("src/{}: room `{room}` is not in the module map (tests/rooms.rs)", rel.display()));
            continue;
        };
        let text = std::fs::read_to_string(f).unwrap();
        for used in uses(&code_of(&text)) {
            if used != room && !ok.contains(&used.as_str()) {
                wrong.push(format!("src/{}: `{room}` uses `{used}`, which is not below it", rel.display()));
            }
        }
    }
    assert!(wrong.is_empty(), "dependencies that point the wrong way:\n{}", wrong.join("\n"));
    let mapped: BTreeSet<String> = ROOMS.iter().map(|(r, _)| r.to_string()).collect();
    assert_eq!(seen_rooms, mapped, "every room in the map exists in src/ and the other way round");
}

#[test]
fn the_map_has_no_cycles_and_only_points_down() {
    // Each room may use only rooms listed before it, so no cycle can exist.
    for (i, (room, below)) in ROOMS.iter().enumerate() {
        for b in *below {
            let j = ROOMS.iter().position(|(r, _)| r == b).unwrap_or_else(|| panic!("{room} names unknown {b}"));
            assert!(j < i, "{room} may use {b}, which is not listed before it");
        }
    }
}

#[test]
fn the_check_sees_an_upward_arrow() {
    // The reader itself: a use in code counts, one in a comment or a test
    // module does not.
    let text = "use crate::bus::Address;\n// crate::cli::exit\nfn f() { crate::trace::x(); }\n#[cfg(test)]\nmod tests {\n    use crate::cli::compose;\n}\n";
    let found = uses(&code_of(text));
    assert_eq!(found, ["bus", "trace"].iter().map(|s| s.to_string()).collect());
}
