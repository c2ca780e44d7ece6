//! The API's OpenAPI 3.1 document, built from the code: every `/api/v1` route and its
//! access rule come from [`super::route_table`], request and answer schemas from the wire
//! types (`utoipa::ToSchema`, which reads their serde attributes), and each operation's
//! words and parameters from [`ops::describe`]. A route the table has and `describe`
//! does not know is listed in [`Document::undocumented`]; the test of this module and
//! `cairn openapi` refuse such a document.
//!
//! Served at `GET /api/v1/openapi.json` and written by `cairn openapi [--out FILE]`.

pub mod ops;

use super::access::{Access, Rule};
use crate::accounts::Role;
use crate::error::ApiError;
use axum::http::Method;
use serde_json::{Map, Value, json};
use std::sync::OnceLock;

/// The path the document is served at.
pub const DOCUMENT_PATH: &str = "/api/v1/openapi.json";

/// The document and the routes it could not describe.
pub struct Document {
    pub json: Value,
    /// `METHOD path` of every API route that [`ops::describe`] does not know.
    pub undocumented: Vec<String>,
}

/// Collects the component schemas the operations refer to.
#[derive(Default)]
pub struct Schemas {
    map: Map<String, Value>,
}

impl Schemas {
    /// Adds `T`'s schema (and those it refers to) and returns a reference to it.
    pub fn of<T: utoipa::ToSchema>(&mut self) -> Value {
        let name = T::name().into_owned();
        let mut nested = Vec::new();
        T::schemas(&mut nested);
        for (n, s) in nested {
            self.insert(n, &s);
        }
        self.insert(name.clone(), &T::schema());
        json!({ "$ref": format!("#/components/schemas/{name}") })
    }

    /// Returns a schema of a JSON array of `T`.
    pub fn list_of<T: utoipa::ToSchema>(&mut self) -> Value {
        json!({ "type": "array", "items": self.of::<T>() })
    }

    /// Adds a schema by name. Two wire types of one name would make every reference to
    /// either point at one of them, so a second, different schema of a name is a
    /// programmer's error (give one `#[schema(as = OtherName)]`).
    fn insert(&mut self, name: String, schema: &impl serde::Serialize) {
        let value = serde_json::to_value(schema).expect("a schema serialises to JSON");
        match self.map.get(&name) {
            Some(held) => assert_eq!(
                held, &value,
                "two different schemas are named {name}; rename one with #[schema(as = …)]"
            ),
            None => {
                self.map.insert(name, value);
            }
        }
    }
}

/// Returns the document, built once per process.
pub fn document() -> &'static Document {
    static DOC: OnceLock<Document> = OnceLock::new();
    DOC.get_or_init(build)
}

/// Serves the document (`GET /api/v1/openapi.json`).
pub async fn serve() -> Result<axum::Json<Value>, ApiError> {
    let doc = document();
    if !doc.undocumented.is_empty() {
        return Err(ApiError::Internal(anyhow::anyhow!(
            "routes without documentation: {}",
            doc.undocumented.join(", ")
        )));
    }
    Ok(axum::Json(doc.json.clone()))
}

/// Builds the document from the route table.
fn build() -> Document {
    let rules: Vec<Rule> = super::route_rules()
        .into_iter()
        .filter(Rule::is_api)
        .collect();
    let mut schemas = Schemas::default();
    let error = schemas.of::<crate::error::ErrorBody>();
    let mut paths = Map::new();
    let mut undocumented = Vec::new();
    for rule in &rules {
        let Some(op) = ops::describe(&rule.method, rule.path, &mut schemas) else {
            undocumented.push(format!("{} {}", rule.method, rule.path));
            continue;
        };
        let item = paths
            .entry(rule.path.to_string())
            .or_insert_with(|| json!({}))
            .as_object_mut()
            .expect("a path item is an object");
        item.insert(
            rule.method.as_str().to_ascii_lowercase(),
            operation(rule, op, &error),
        );
    }
    let json = json!({
        "openapi": "3.1.0",
        "info": {
            "title": "Cairn API",
            "version": env!("CARGO_PKG_VERSION"),
            "description": ops::OVERVIEW,
        },
        "servers": [{ "url": "/" }],
        "paths": paths,
        "components": {
            "schemas": schemas.map,
            "securitySchemes": {
                "integration_token": {
                    "type": "http", "scheme": "bearer",
                    "description": "A host system's token (`cairn_api_…`): one role of one user \
                                    at one site. Made on the admin page or by `cairn user token`."
                },
                "device_token": {
                    "type": "http", "scheme": "bearer",
                    "description": "A phone's token (`cairn_dev_…`), from `POST /api/v1/devices`."
                },
                "session": {
                    "type": "apiKey", "in": "cookie",
                    "name": crate::accounts::session::SESSION_COOKIE,
                    "description": "A signed-in person's session; the API takes it for GET only."
                }
            }
        }
    });
    Document { json, undocumented }
}

/// Builds one operation: the words from `op`, and from the rule its access, security,
/// path parameters and the error answers every route of its kind can give.
fn operation(rule: &Rule, op: ops::Op, error: &Value) -> Value {
    let (access_text, access_ext) = access(rule.access);
    let description = if op.description.is_empty() {
        format!("Access: {access_text}.")
    } else {
        format!("{}\n\nAccess: {access_text}.", op.description)
    };
    let mut parameters: Vec<Value> = path_params(rule.path);
    for q in &op.query {
        parameters.push(json!({
            "name": q.name,
            "in": "query",
            "required": false,
            "description": q.description,
            "schema": q.schema,
        }));
    }
    if op.etag {
        parameters.push(json!({
            "name": "If-None-Match",
            "in": "header",
            "required": false,
            "description": "The ETag of an earlier answer: 304 with no body when nothing changed.",
            "schema": { "type": "string" },
        }));
    }

    let mut responses = Map::new();
    let mut ok = json!({ "description": op.ok_text });
    if let Some(schema) = &op.ok_schema {
        let mut content = json!({ "application/json": { "schema": schema } });
        if let Some(example) = &op.ok_example {
            content["application/json"]["example"] = example.clone();
        }
        if op.csv {
            content["text/csv"] = json!({ "schema": { "type": "string" } });
        }
        ok["content"] = content;
    }
    if op.etag {
        ok["headers"] = json!({ "ETag": { "schema": { "type": "string" },
            "description": "A weak validator of the body (SHA-256)." } });
        responses.insert(
            "304".into(),
            json!({ "description": "Not modified: the ETag named in If-None-Match is current." }),
        );
    }
    responses.insert(op.ok_status.to_string(), ok);

    let mut errors: Vec<(u16, &str)> = Vec::new();
    let has_input = !op.query.is_empty() || op.body.is_some() || rule.path.contains('{');
    if has_input || rule.access != Access::Public {
        errors.push((
            400,
            "A parameter or the body is malformed; the text names which.",
        ));
    }
    match rule.access {
        Access::Public => {}
        _ => {
            errors.push((
                401,
                "No credential, or one that is unknown, revoked or expired.",
            ));
            errors.push((
                403,
                "The credential holds none of the roles this route admits.",
            ));
        }
    }
    if rule.path.contains('{') {
        errors.push((
            404,
            "The site (or another thing the path names) does not exist.",
        ));
    }
    if op.body.is_some() {
        errors.push((413, "The body is larger than `max_body_bytes`."));
    }
    for (status, text) in op.errors {
        if !errors.iter().any(|(s, _)| s == status) {
            errors.push((*status, text));
        }
    }
    errors.sort_by_key(|(s, _)| *s);
    for (status, text) in errors {
        let mut answer = json!({
            "description": text,
            "content": { "application/json": { "schema": error } },
        });
        if status == 422 {
            answer["content"]["application/json"]["example"] = json!({
                "error": "1 row(s) refused; nothing was written",
                "rows": [{ "index": 0, "field": "qty", "message": "must not be 0" }],
            });
        }
        if status == 429 {
            answer["headers"] = json!({ "Retry-After": { "schema": { "type": "integer" },
                "description": "Seconds to wait before trying again (when the server is busy)." } });
        }
        responses.insert(status.to_string(), answer);
    }

    let mut out = json!({
        "operationId": operation_id(&rule.method, rule.path),
        "summary": op.summary,
        "description": description,
        "tags": [tag(rule.path)],
        "parameters": parameters,
        "responses": responses,
        "security": security(rule),
        "x-cairn-access": access_ext,
    });
    if let Some(body) = op.body {
        let mut content = json!({ "schema": body });
        if let Some(example) = op.body_example {
            content["example"] = example;
        }
        out["requestBody"] = json!({
            "required": true,
            "content": { "application/json": content },
        });
    }
    out
}

/// Says in words and as an extension who may use a route.
fn access(rule: Access) -> (String, Value) {
    match rule {
        Access::Public => ("anyone, no credential".into(), json!({ "rule": "public" })),
        Access::SignedIn => (
            "anyone with a credential, any role".into(),
            json!({ "rule": "signed_in" }),
        ),
        Access::Device => (
            "an enrolled phone, by its device token".into(),
            json!({ "rule": "device" }),
        ),
        Access::Site(roles) => {
            let names: Vec<&str> = roles.iter().map(|r| Role::as_str(*r)).collect();
            (
                format!(
                    "a credential holding one of these roles at the site: {}",
                    names.join(", ")
                ),
                json!({ "rule": "site", "roles": names }),
            )
        }
    }
}

/// Which credentials a route takes: bearer tokens, and a session for GET.
fn security(rule: &Rule) -> Value {
    match rule.access {
        Access::Public => json!([]),
        Access::Device => json!([{ "device_token": [] }]),
        Access::SignedIn | Access::Site(_) => {
            let mut schemes = vec![json!({ "integration_token": [] })];
            if matches!(rule.access, Access::Site(roles) if roles.contains(&Role::Counter)) {
                schemes.push(json!({ "device_token": [] }));
            }
            if rule.method == Method::GET {
                schemes.push(json!({ "session": [] }));
            }
            Value::Array(schemes)
        }
    }
}

/// Describes the `{param}`s of a path.
fn path_params(path: &str) -> Vec<Value> {
    path.split('/')
        .filter_map(|part| part.strip_prefix('{')?.strip_suffix('}'))
        .map(|name| {
            let (description, schema) = ops::path_param(name);
            json!({
                "name": name,
                "in": "path",
                "required": true,
                "description": description,
                "schema": schema,
            })
        })
        .collect()
}

/// Names an operation from its method and path (`get_sites_site_bins`).
fn operation_id(method: &Method, path: &str) -> String {
    let mut id = method.as_str().to_ascii_lowercase();
    for part in path.trim_start_matches("/api/v1/").split('/') {
        let word: String = part
            .chars()
            .map(|c| if c.is_ascii_alphanumeric() { c } else { '_' })
            .collect();
        let word = word.trim_matches('_');
        if !word.is_empty() {
            id.push('_');
            id.push_str(word);
        }
    }
    id
}

/// Groups an operation by the first word after the site (`bins`, `count-results`).
fn tag(path: &str) -> String {
    let rest = path.trim_start_matches("/api/v1/");
    let mut parts = rest.split('/').filter(|p| !p.starts_with('{'));
    match (parts.next(), parts.next()) {
        (Some("sites"), Some(word)) => word.to_string(),
        (Some("sites"), None) => "sites".to_string(),
        (Some(word), _) => word.to_string(),
        _ => "api".to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn operation_ids_follow_the_path() {
        assert_eq!(
            operation_id(&Method::GET, "/api/v1/sites/{site}/bins/{bin}/movements"),
            "get_sites_site_bins_bin_movements"
        );
        assert_eq!(
            tag("/api/v1/sites/{site}/count-results/{id}"),
            "count-results"
        );
        assert_eq!(tag("/api/v1/devices"), "devices");
    }
}
