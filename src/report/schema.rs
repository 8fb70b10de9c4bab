//! JSON Schemas (draft 2020-12) of the JSON files slackmap writes, generated from the Rust
//! types that write them (schemars), so that the published schema and the files cannot drift
//! apart. `slackmap schema NAME` prints one; the tests validate the demo's files against them.

use schemars::JsonSchema;

/// A JSON file slackmap writes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Document {
    /// `audit.json` of `audit`, `merge`, `demo` and `report`.
    Audit,
    /// `compare.json` of `compare`.
    Compare,
    /// `hints.json` of `hints`.
    Hints,
    /// `hints-compare.json` of `hints --compare`.
    HintsCompare,
    /// `plan.json` of `plan`.
    Plan,
}

impl Document {
    /// Every document, in the order `slackmap schema all` writes them.
    pub const ALL: [Document; 5] = [
        Document::Audit,
        Document::Compare,
        Document::Hints,
        Document::HintsCompare,
        Document::Plan,
    ];

    /// The document's name on the command line: the file name without `.json`.
    pub fn name(self) -> &'static str {
        match self {
            Document::Audit => "audit",
            Document::Compare => "compare",
            Document::Hints => "hints",
            Document::HintsCompare => "hints-compare",
            Document::Plan => "plan",
        }
    }

    /// The document a name given by [`Document::name`] stands for.
    pub fn from_name(name: &str) -> Option<Document> {
        Document::ALL.into_iter().find(|d| d.name() == name)
    }

    /// The file name the schema is written under: `<name>.schema.json`.
    pub fn file_name(self) -> String {
        format!("{}.schema.json", self.name())
    }

    /// The schema as a JSON value.
    pub fn schema(self) -> serde_json::Value {
        fn of<T: JsonSchema>() -> serde_json::Value {
            schemars::schema_for!(T).to_value()
        }
        match self {
            Document::Audit => of::<super::AuditReport>(),
            Document::Compare => of::<crate::compare::CompareReport>(),
            Document::Hints => of::<crate::hints::HintsReport>(),
            Document::HintsCompare => of::<crate::hints::HintsComparison>(),
            Document::Plan => of::<crate::plan::PlanReport>(),
        }
    }

    /// The schema as pretty-printed JSON with a final newline.
    pub fn schema_bytes(self) -> Vec<u8> {
        let mut v = serde_json::to_vec_pretty(&self.schema()).unwrap_or_default();
        v.push(b'\n');
        v
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip_and_schemas_describe_objects() {
        for d in Document::ALL {
            assert_eq!(Document::from_name(d.name()), Some(d));
            let s = d.schema();
            assert_eq!(s["type"], "object", "{}", d.name());
            assert!(s["properties"]["schema"].is_object(), "{}: no schema field", d.name());
        }
        let audit = Document::Audit.schema().to_string();
        assert!(audit.contains("not-identified") && audit.contains("above-threshold"));
    }
}
