//! What changed between two revisions of a goal, in words: terms added, removed, and moved by how
//! many pixels.
//!
//! Terms carry no ids, so they are paired first by a label that is unique in both revisions, then
//! in order among the remaining terms of the same kind. That pairs what a person would pair in
//! the common edits (drag a point, add a term, delete one) without guessing across kinds.

use serde_json::Value;

/// One line of the comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct Change {
    /// `added`, `removed`, `moved`, `changed`, `same` or `goal`.
    pub kind: &'static str,
    /// The sentence shown.
    pub text: String,
}

fn xy(v: &Value) -> Option<[f64; 2]> {
    Some([v.get(0)?.as_f64()?, v.get(1)?.as_f64()?])
}

fn dist(a: [f64; 2], b: [f64; 2]) -> f64 {
    (a[0] - b[0]).hypot(a[1] - b[1])
}

fn points(v: &Value) -> Vec<[f64; 2]> {
    v.as_array()
        .map(|a| a.iter().filter_map(xy).collect())
        .unwrap_or_default()
}

fn label(t: &Value) -> Option<&str> {
    t["label"].as_str().filter(|s| !s.trim().is_empty())
}

fn kind(t: &Value) -> &str {
    t["kind"].as_str().unwrap_or("?")
}

/// How a term is named in sentences: its number in revision B (1-based), kind and label.
fn name(index: usize, t: &Value) -> String {
    match label(t) {
        Some(l) => format!("term {} “{l}” ({})", index + 1, kind(t)),
        None => format!("term {} ({})", index + 1, kind(t)),
    }
}

fn px(d: f64) -> String {
    if d < 0.05 {
        "less than 0.1 px".into()
    } else {
        format!("{d:.1} px")
    }
}

/// Describes how a paired term moved or changed; empty when it is the same.
fn term_changes(a: &Value, b: &Value) -> (Vec<String>, bool) {
    let mut out = Vec::new();
    let mut moved = false;
    let mut single = |what: &str, key: &str, out: &mut Vec<String>| {
        if let (Some(pa), Some(pb)) = (xy(&a[key]), xy(&b[key])) {
            let d = dist(pa, pb);
            if d > 1e-9 {
                moved = true;
                out.push(format!("{what} moved {}", px(d)));
            }
        }
    };
    single("source", "source", &mut out);
    single("target", "target", &mut out);
    for (what, key) in [
        ("sources", "sources"),
        ("targets", "targets"),
        ("area", "polygon"),
    ] {
        let (pa, pb) = (points(&a[key]), points(&b[key]));
        if pa.is_empty() && pb.is_empty() {
            continue;
        }
        if pa.len() != pb.len() {
            out.push(format!(
                "{what} changed from {} to {} points",
                pa.len(),
                pb.len()
            ));
            moved = true;
        } else {
            let max = pa
                .iter()
                .zip(&pb)
                .map(|(p, q)| dist(*p, *q))
                .fold(0.0f64, f64::max);
            if max > 1e-9 {
                moved = true;
                out.push(format!("{what} moved by up to {}", px(max)));
            }
        }
    }
    if a["mask_png_base64"] != b["mask_png_base64"] {
        out.push("painted area repainted".into());
    }
    for (what, key) in [("weight", "weight"), ("tolerance", "tolerance_px")] {
        if a[key] != b[key] {
            out.push(format!("{what} {} → {}", a[key], b[key]));
        }
    }
    if label(a) != label(b) {
        out.push(format!(
            "label “{}” → “{}”",
            label(a).unwrap_or(""),
            label(b).unwrap_or("")
        ));
    }
    if a["allow_scale"] != b["allow_scale"] {
        out.push("scale allowance changed".into());
    }
    (out, moved)
}

/// Pairs the terms of two revisions: (index in a, index in b).
fn pair(ta: &[Value], tb: &[Value]) -> Vec<(usize, usize)> {
    let mut pairs = Vec::new();
    let mut used_a = vec![false; ta.len()];
    let mut used_b = vec![false; tb.len()];
    let unique = |ts: &[Value], l: &str| ts.iter().filter(|t| label(t) == Some(l)).count() == 1;
    for (j, t) in tb.iter().enumerate() {
        let Some(l) = label(t) else { continue };
        if !unique(tb, l) || !unique(ta, l) {
            continue;
        }
        if let Some(i) = ta
            .iter()
            .position(|s| label(s) == Some(l) && kind(s) == kind(t))
        {
            pairs.push((i, j));
            used_a[i] = true;
            used_b[j] = true;
        }
    }
    for (j, t) in tb.iter().enumerate() {
        if used_b[j] {
            continue;
        }
        if let Some(i) = (0..ta.len()).find(|&i| !used_a[i] && kind(&ta[i]) == kind(t)) {
            pairs.push((i, j));
            used_a[i] = true;
            used_b[j] = true;
        }
    }
    pairs.sort_by_key(|p| p.1);
    pairs
}

/// The changes from revision document `a` to `b`.
pub fn diff(a: &Value, b: &Value) -> Vec<Change> {
    let empty = Vec::new();
    let ta = a["terms"].as_array().unwrap_or(&empty);
    let tb = b["terms"].as_array().unwrap_or(&empty);
    let mut out = Vec::new();
    if a["name"] != b["name"] {
        out.push(Change {
            kind: "goal",
            text: format!(
                "renamed from “{}” to “{}”",
                a["name"].as_str().unwrap_or(""),
                b["name"].as_str().unwrap_or("")
            ),
        });
    }
    if a["cost"] != b["cost"] {
        out.push(Change {
            kind: "goal",
            text: format!("cost settings changed from {} to {}", a["cost"], b["cost"]),
        });
    }
    if a["frame_id"] != b["frame_id"] {
        out.push(Change {
            kind: "goal",
            text: "drawn on a different frame".into(),
        });
    }
    if a["override_safety"] != b["override_safety"] {
        out.push(Change {
            kind: "goal",
            text: format!(
                "safety override {} → {}",
                a["override_safety"], b["override_safety"]
            ),
        });
    }
    let pairs = pair(ta, tb);
    for (j, tj) in tb.iter().enumerate() {
        match pairs.iter().find(|p| p.1 == j) {
            Some(&(i, _)) => {
                let (lines, moved) = term_changes(&ta[i], tj);
                let kind = if lines.is_empty() {
                    "same"
                } else if moved {
                    "moved"
                } else {
                    "changed"
                };
                let text = if lines.is_empty() {
                    format!("{}: unchanged", name(j, tj))
                } else {
                    format!("{}: {}", name(j, tj), lines.join("; "))
                };
                out.push(Change { kind, text });
            }
            None => out.push(Change {
                kind: "added",
                text: format!("{} added", name(j, tj)),
            }),
        }
    }
    for (i, t) in ta.iter().enumerate() {
        if !pairs.iter().any(|p| p.0 == i) {
            let text = match label(t) {
                Some(l) => format!("“{l}” ({}, term {} before) removed", kind(t), i + 1),
                None => format!("{} term {} of the older revision removed", kind(t), i + 1),
            };
            out.push(Change {
                kind: "removed",
                text,
            });
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn moved_added_removed() {
        let a = json!({"name": "g", "terms": [
            {"kind": "point", "label": "pot", "source": [0.0, 0.0], "target": [10.0, 0.0], "weight": 1.0},
            {"kind": "point", "source": [5.0, 5.0], "target": [6.0, 6.0], "weight": 1.0},
        ]});
        let b = json!({"name": "g", "terms": [
            {"kind": "point", "label": "pot", "source": [0.0, 0.0], "target": [13.0, 4.0], "weight": 1.0},
            {"kind": "region", "source": [1.0, 1.0], "polygon": [[0.0,0.0],[4.0,0.0],[4.0,4.0]], "weight": 1.0},
        ]});
        let d = diff(&a, &b);
        assert_eq!(d[0].kind, "moved");
        assert!(d[0].text.contains("target moved 5.0 px"), "{}", d[0].text);
        assert_eq!(d[1].kind, "added");
        assert_eq!(d[2].kind, "removed");
        assert_eq!(d.len(), 3);
    }

    #[test]
    fn same_and_weight() {
        let t = json!({"kind": "point", "source": [0.0, 0.0], "target": [1.0, 0.0], "weight": 1.0});
        let mut t2 = t.clone();
        t2["weight"] = json!(2.0);
        let d = diff(
            &json!({"terms": [t.clone(), t.clone()]}),
            &json!({"terms": [t, t2]}),
        );
        assert_eq!(d[0].kind, "same");
        assert_eq!(d[1].kind, "changed");
        assert!(d[1].text.contains("weight 1.0 → 2.0"), "{}", d[1].text);
    }
}
