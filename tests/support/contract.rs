//! The one OpenAPI contract checker: a served OpenAPI document (public or admin), and checks of
//! instances and live replies against the schemas it declares (JSON Schema 2020-12, by the
//! `jsonschema` crate, an implementation independent of ours).

use serde_json::{json, Value as Json};

use super::server::{Reply, TestServer};

/// A served OpenAPI document, read once.
pub struct Contract {
    doc: Json,
}

impl Contract {
    /// The document the public listener of `server` serves.
    pub fn public(server: &TestServer) -> Contract {
        Contract {
            doc: server.get("/openapi.json").json(),
        }
    }

    /// The document the admin listener of `server` serves.
    pub fn admin(server: &TestServer) -> Contract {
        Contract {
            doc: server.admin("GET", "/openapi.json", None).expect(200),
        }
    }

    /// The document itself.
    pub fn document(&self) -> &Json {
        &self.doc
    }

    /// A validator for the JSON Schema `root`, resolved against the document's components.
    fn validator_of(&self, root: Json, what: &str) -> jsonschema::Validator {
        let mut root = root;
        root["$schema"] = json!("https://json-schema.org/draft/2020-12/schema");
        root["components"] = self.doc["components"].clone();
        jsonschema::validator_for(&root).unwrap_or_else(|e| panic!("schema {what}: {e}"))
    }

    /// A validator for the component schema `schema`.
    pub fn validator(&self, schema: &str) -> jsonschema::Validator {
        self.validator_of(
            json!({"$ref": format!("#/components/schemas/{schema}")}),
            schema,
        )
    }

    /// `instance` is valid under the component schema `schema`.
    #[track_caller]
    pub fn check(&self, schema: &str, instance: &Json, what: &str) {
        let errors: Vec<String> = self
            .validator(schema)
            .iter_errors(instance)
            .map(|e| format!("{e} at {}", e.instance_path()))
            .collect();
        assert!(
            errors.is_empty(),
            "{what} does not match {schema}: {errors:?}\n{instance}"
        );
    }

    /// The documented response of `path`'s operation `method` for the reply's status (or the
    /// operation's `default`), checked: an X-Request-Id, no body where none is documented, the
    /// media type, and the body against the documented schema (a component by `$ref`, or an
    /// inline `type`).
    #[track_caller]
    pub fn check_reply(&self, path: &str, method: &str, reply: &Reply, what: &str) {
        let operation = &self.doc["paths"][path][method];
        assert!(operation.is_object(), "{method} {path} is not documented");
        let status = reply.status.to_string();
        let response = if operation["responses"][&status].is_object() {
            &operation["responses"][&status]
        } else {
            &operation["responses"]["default"]
        };
        assert!(
            response.is_object(),
            "{what}: {method} {path} status {status} is not documented"
        );
        assert!(
            reply.header("x-request-id").is_some(),
            "{what}: no X-Request-Id"
        );
        let Some(content) = response["content"].as_object() else {
            assert!(reply.text.is_empty(), "{what}: undocumented body");
            return;
        };
        let media = reply
            .header("content-type")
            .and_then(|c| c.split(';').next())
            .expect("content type");
        let schema = &content
            .get(media)
            .unwrap_or_else(|| panic!("{what}: media type {media} not documented"))["schema"];
        let root = match schema["$ref"].as_str() {
            Some(reference) => json!({"$ref": reference}),
            None if schema["type"].is_string() => json!({"type": schema["type"]}),
            None => return,
        };
        let errors: Vec<String> = self
            .validator_of(root, path)
            .iter_errors(&reply.json())
            .map(|e| format!("{e} at {}", e.instance_path()))
            .collect();
        assert!(
            errors.is_empty(),
            "{what}: {method} {path} {status} does not match the document: {errors:?}\n{}",
            reply.text
        );
    }
}
