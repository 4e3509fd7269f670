//! The finding kinds, in one table ([`KINDS`]): each kind's name in reports and what it means.
//! Report order, names in text and JSON, and the schema's list derive from it; a new kind is a
//! variant and a row here, its detector in [`super::detect`], and its name in
//! `schemas/check.schema.json` (a test compares the schema with this table).

/// A kind of finding. Everything about it is in its row of [`KINDS`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Kind {
    /// Equal to a sealed test row, label included.
    Row,
    /// Same features as a sealed test row.
    Features,
    /// Equal after normalisation.
    Near,
    /// A sealed test group key.
    Group,
    /// In the test period.
    Time,
}

/// One finding kind's row of the table.
pub struct KindInfo {
    /// The kind.
    pub kind: Kind,
    /// Its name in reports (text and JSON).
    pub name: &'static str,
    /// What a finding of this kind means.
    pub meaning: &'static str,
}

/// Every kind, in report order.
pub const KINDS: &[KindInfo] = &[
    KindInfo { kind: Kind::Row, name: "row", meaning: "a row equals a sealed test row, label included" },
    KindInfo { kind: Kind::Features, name: "features", meaning: "a row has the features of a sealed test row" },
    KindInfo { kind: Kind::Near, name: "near", meaning: "a row equals a sealed test row after normalisation" },
    KindInfo { kind: Kind::Group, name: "group", meaning: "a row holds a group key of the sealed test set" },
    KindInfo { kind: Kind::Time, name: "time", meaning: "a row falls in the test period (less the gap)" },
];

impl Kind {
    /// All kinds, in report order.
    pub const ALL: [Kind; 5] = [Kind::Row, Kind::Features, Kind::Near, Kind::Group, Kind::Time];

    /// The kind's row of [`KINDS`].
    pub fn info(self) -> &'static KindInfo {
        KINDS.iter().find(|k| k.kind == self).expect("every kind has a row")
    }

    /// The kind's name in reports.
    pub fn name(self) -> &'static str {
        self.info().name
    }
}

#[cfg(test)]
mod tests {
    use super::{Kind, KINDS};

    #[test]
    fn the_table_lists_every_kind_once_in_report_order() {
        let kinds: Vec<Kind> = KINDS.iter().map(|k| k.kind).collect();
        assert_eq!(kinds, Kind::ALL);
    }

    /// The check schema names exactly the table's kinds, in order: the findings' properties and
    /// the kinds a reason may name.
    #[test]
    fn the_schema_lists_the_tables_kinds() {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("schemas/check.schema.json");
        let text = std::fs::read_to_string(path).expect("schema");
        let schema: serde_json::Value = serde_json::from_str(&text).expect("JSON");
        let names: Vec<&str> = KINDS.iter().map(|k| k.name).collect();
        let findings = schema.pointer("/$defs/findings/properties").and_then(|v| v.as_object()).expect("findings");
        let mut listed: Vec<&str> = findings.keys().map(String::as_str).collect();
        let mut sorted = names.clone();
        sorted.sort();
        listed.sort();
        assert_eq!(listed, sorted);
        let reasons: Vec<&str> = schema
            .pointer("/$defs/reason/properties/kind/enum")
            .and_then(|v| v.as_array())
            .expect("reason kinds")
            .iter()
            .map(|v| v.as_str().expect("text"))
            .collect();
        assert_eq!(reasons, names);
    }
}
