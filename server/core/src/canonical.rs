//! The canonical JSON form: object keys sorted at every level, no whitespace. Revisions and
//! goal sets are stored and hashed in this form, so the same content always has the same bytes
//! and SHA-256, whatever the serialiser's feature flags.

use serde_json::Value;

/// Serialises JSON with object keys sorted at every level and no whitespace: the canonical form
/// hashed into a revision's `sha256`, independent of serde_json feature flags.
pub fn to_string(v: &Value) -> String {
    fn write(v: &Value, out: &mut String) {
        match v {
            Value::Object(m) => {
                let mut keys: Vec<&String> = m.keys().collect();
                keys.sort();
                out.push('{');
                for (i, k) in keys.iter().enumerate() {
                    if i > 0 {
                        out.push(',');
                    }
                    out.push_str(&Value::String((*k).clone()).to_string());
                    out.push(':');
                    write(&m[*k], out);
                }
                out.push('}');
            }
            Value::Array(a) => {
                out.push('[');
                for (i, x) in a.iter().enumerate() {
                    if i > 0 {
                        out.push(',');
                    }
                    write(x, out);
                }
                out.push(']');
            }
            other => out.push_str(&other.to_string()),
        }
    }
    let mut out = String::new();
    write(v, &mut out);
    out
}

#[cfg(test)]
mod tests {
    use serde_json::json;

    /// Keys sorted by their UTF-8 bytes at every depth, strings escaped as JSON escapes them,
    /// numbers as serde_json writes them (RFC 8785's sort order, from memory; its number form
    /// is not claimed).
    #[test]
    fn sorted_and_compact() {
        let v = json!({"b": [1, {"z": null, "a": "é\n"}], "a": true, "A": 1.5});
        assert_eq!(
            super::to_string(&v),
            r#"{"A":1.5,"a":true,"b":[1,{"a":"é\n","z":null}]}"#
        );
    }
}
