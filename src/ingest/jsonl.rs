//! JSON Lines input (`serde_json`): one object per line, the items in a string field, the
//! ids optionally in an integer or string field.

use std::io::Read;

use super::{for_each_line, Builder, IdValue, IngestError};

fn json_type(v: &serde_json::Value) -> &'static str {
    match v {
        serde_json::Value::Null => "null",
        serde_json::Value::Bool(_) => "a boolean",
        serde_json::Value::Number(_) => "a number",
        serde_json::Value::String(_) => "a string",
        serde_json::Value::Array(_) => "an array",
        serde_json::Value::Object(_) => "an object",
    }
}

pub(super) fn read_jsonl<R: Read>(reader: R, b: &mut Builder<'_>) -> Result<(), IngestError> {
    let Some(field) = b.opts.field.clone() else {
        return Err(b.options_error("say which JSON field holds the items with --field".into()));
    };
    let id_field = b.opts.id_field.clone();
    let name = b.name;
    for_each_line(reader, name, |line, bytes, _| {
        if bytes.iter().all(|c| c.is_ascii_whitespace()) {
            b.records += 1;
            b.blank += 1;
            return Ok(());
        }
        let v: serde_json::Value = serde_json::from_slice(bytes).map_err(|e| {
            // serde_json counts lines within the one line it was given; report the file's
            // line and serde_json's column instead.
            let full = e.to_string();
            let suffix = format!(" at line {} column {}", e.line(), e.column());
            let what = full.strip_suffix(&suffix).unwrap_or(&full);
            b.record_error(
                line,
                format!("invalid JSON at column {}: {what}", e.column()),
            )
        })?;
        let Some(obj) = v.as_object() else {
            return Err(b.record_error(
                line,
                format!("expected a JSON object, found {}", json_type(&v)),
            ));
        };
        let item = match obj.get(&field) {
            Some(serde_json::Value::String(s)) => s.clone(),
            Some(other) => {
                return Err(b.record_error(
                    line,
                    format!(
                        "field \"{field}\" must be a string, found {}",
                        json_type(other)
                    ),
                ))
            }
            None => return Err(b.record_error(line, format!("field \"{field}\" is missing"))),
        };
        let id = match &id_field {
            None => None,
            Some(f) => match obj.get(f) {
                Some(serde_json::Value::String(s)) => Some(IdValue::Text(s.clone())),
                Some(serde_json::Value::Number(n)) if n.is_i64() => {
                    Some(IdValue::Int(n.as_i64().expect("checked")))
                }
                Some(other) => {
                    let found = match other {
                        serde_json::Value::Number(n) if n.is_u64() => {
                            "an integer larger than 9223372036854775807 (2^63 - 1)"
                        }
                        serde_json::Value::Number(_) => "a non-integer number",
                        _ => json_type(other),
                    };
                    return Err(b.record_error(
                        line,
                        format!("id field \"{f}\" must be an integer or a string, found {found}"),
                    ));
                }
                None => return Err(b.record_error(line, format!("id field \"{f}\" is missing"))),
            },
        };
        b.push(item, id, line)
    })
}
