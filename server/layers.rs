//! The layering rule, checked: the two edges (`api`, `pages`) never import each other; the
//! service imports neither edge; the store and the modules below the service import nothing
//! above them. The core crate cannot import the server at all (it is its own crate and does not
//! depend on this one).
//!
//! The check reads the sources: any path `crate::X` (or `goalsmith::X`) in a module of layer L
//! must name a layer L may use. `super::` paths cannot leave a module's own folder except at
//! its top, where they name `crate` items, so they are checked as `crate::` paths there.

#[cfg(test)]
mod tests {
    use std::path::Path;

    /// What each part of the crate may name, by the first segment after `crate::`.
    fn allowed(part: &str) -> Vec<&'static str> {
        // The modules below the service: what any layer above them may use.
        const BELOW: &[&str] = &[
            "scoring",
            "images",
            "config",
            "security",
            "cookies",
            "strict_json",
            "demo_archive",
            "draw",
            "SAFETY_CAUTION",
        ];
        let above = |own: &[&'static str]| [own, &["store"], BELOW].concat();
        match part {
            "api" => above(&["api", "service"]),
            "pages" => above(&["pages", "service"]),
            "service" => above(&["service"]),
            "store" => vec!["store"],
            "scoring" | "images" | "config" | "cookies" | "strict_json" | "demo_archive"
            | "draw" => BELOW.to_vec(),
            "security" => vec!["security", "config", "SAFETY_CAUTION"],
            "wire" => vec!["wire"],
            _ => Vec::new(),
        }
    }

    fn sources(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
        for entry in std::fs::read_dir(dir).expect("source folder").flatten() {
            let p = entry.path();
            if p.is_dir() {
                sources(&p, out);
            } else if p.extension().is_some_and(|e| e == "rs") {
                out.push(p);
            }
        }
    }

    /// The part of the crate a source file belongs to: its folder or its file name under
    /// `server/`.
    fn part_of(root: &Path, file: &Path) -> String {
        let rel = file.strip_prefix(root).expect("under server/");
        let first = rel.components().next().expect("a component");
        first
            .as_os_str()
            .to_string_lossy()
            .trim_end_matches(".rs")
            .to_string()
    }

    /// `line: part names crate::x` for every path in `text` that `part` may not name.
    fn violations(part: &str, text: &str) -> Vec<String> {
        let rules = allowed(part);
        let mut broken = Vec::new();
        for (n, line) in text.lines().enumerate() {
            // A file's unit tests (at its end, by convention) may put the whole app together.
            if line.trim_start().starts_with("#[cfg(test)]") {
                break;
            }
            let code = line.split("//").next().unwrap_or("");
            if code.contains("super::super") {
                broken.push(format!("{}: {part} climbs out with super::super", n + 1));
            }
            for prefix in ["crate::", "goalsmith::"] {
                let mut rest = code;
                while let Some(at) = rest.find(prefix) {
                    let after = &rest[at + prefix.len()..];
                    let name: String = after
                        .chars()
                        .take_while(|c| c.is_alphanumeric() || *c == '_')
                        .collect();
                    let named: Vec<String> = if name.is_empty() {
                        // `crate::{a, b}`: check each name in the braces.
                        after
                            .trim_start_matches('{')
                            .split([',', '}'])
                            .map(|s| s.trim().split("::").next().unwrap_or("").to_string())
                            .filter(|s| {
                                !s.is_empty() && s.chars().all(|c| c.is_alphanumeric() || c == '_')
                            })
                            .collect()
                    } else {
                        vec![name]
                    };
                    for name in named {
                        if !rules.contains(&name.as_str()) {
                            broken.push(format!("{}: {part} names crate::{name}", n + 1));
                        }
                    }
                    rest = after;
                }
            }
        }
        broken
    }

    #[test]
    fn the_edges_never_import_each_other_and_lower_layers_import_nothing_above() {
        let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("server");
        let mut files = Vec::new();
        sources(&root, &mut files);
        let mut broken = Vec::new();
        for file in &files {
            if file.starts_with(root.join("core")) {
                continue; // its own crate; Cargo keeps it from naming the server
            }
            let part = part_of(&root, file);
            let rules = allowed(&part);
            if rules.is_empty() {
                continue; // lib.rs, main.rs, app.rs, cli.rs, demo.rs put the parts together
            }
            let text = std::fs::read_to_string(file).expect("source");
            let name = file
                .strip_prefix(&root)
                .unwrap_or(file)
                .display()
                .to_string();
            broken.extend(
                violations(&part, &text)
                    .into_iter()
                    .map(|v| format!("{name}:{v}")),
            );
        }
        assert!(broken.is_empty(), "layering broken:\n{}", broken.join("\n"));
    }

    /// The check itself catches crossings, in every form a path takes, and lets the allowed
    /// ones through.
    #[test]
    fn the_check_refuses_a_crossing() {
        let crossing = [
            ("pages", "use crate::api::AppState;"),
            ("pages", "    let x = crate::api::goals::update(s);"),
            ("pages", "use crate::{service, api::auth};"),
            ("api", "use crate::pages::not_found_page;"),
            ("service", "use crate::api::error::ErrorBody;"),
            ("store", "use crate::service::auth::Role;"),
            ("scoring", "use goalsmith::api::goals;"),
            ("api", "use super::super::pages::home;"),
        ];
        for (part, line) in crossing {
            assert_eq!(violations(part, line).len(), 1, "{part}: {line}");
        }
        let fine = [
            ("pages", "use crate::service::{AppState, auth};"),
            ("api", "use crate::service::goals::{self, Expected};"),
            ("service", "use crate::store::{self, Role};"),
            ("pages", "// crate::api is named in a comment only"),
        ];
        for (part, line) in fine {
            assert!(violations(part, line).is_empty(), "{part}: {line}");
        }
    }
}
