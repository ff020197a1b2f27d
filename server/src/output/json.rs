//! JSON writer: one document, written incrementally, one row per line.
//!
//! ```text
//! { "kinema_version", "input", "points", "dimension", "method", "length_unit",
//!   "strain_unit", "shear_convention", "angle_convention", "caution",
//!   "parameters": {name: value},
//!   "columns": {"<section>": [{"name", "key", "unit", "meaning"}]},
//!   "<section>": [{"<key>": value, …}, …],   (one member per declared section)
//!   "summary": {"accepted", "rejected", "rejected_by_reason": {reason: count}, "notes": [..]} }
//! ```
//! Row members are the column keys with their unit suffix (`exx_microstrain`).
//! Non-finite numbers are written as `null`; the output never holds `NaN`.

use std::io::{self, Write};

use serde_json::Value;

use super::{
    ANGLE_CONVENTION, CAUTION, Cell, Column, Footer, Header, RowSink, SHEAR_CONVENTION, Schema,
    Section, finite, misuse,
};

/// Top-level members that a section name may not take.
const RESERVED: [&str; 13] = [
    "kinema_version",
    "input",
    "points",
    "dimension",
    "method",
    "length_unit",
    "strain_unit",
    "shear_convention",
    "angle_convention",
    "caution",
    "parameters",
    "columns",
    "summary",
];

/// Streaming JSON writer over any `io::Write`.
pub struct JsonSink<W: Write> {
    out: W,
    schema: Schema,
    /// Keys (`name_unit`) of each section's columns, JSON-encoded with their quotes.
    keys: Vec<Vec<String>>,
    /// Rows written in the open section so far.
    rows_in_section: u64,
}

impl<W: Write> JsonSink<W> {
    /// A writer over `out`.
    pub fn new(out: W) -> Self {
        Self {
            out,
            schema: Schema::default(),
            keys: Vec::new(),
            rows_in_section: 0,
        }
    }

    /// Give the underlying writer back.
    pub fn into_inner(self) -> W {
        self.out
    }

    fn value<T: serde::Serialize + ?Sized>(&mut self, v: &T) -> io::Result<()> {
        serde_json::to_writer(&mut self.out, v).map_err(io::Error::other)
    }

    fn member<T: serde::Serialize + ?Sized>(&mut self, key: &str, v: &T) -> io::Result<()> {
        self.out.write_all(b",\n")?;
        self.value(key)?;
        self.out.write_all(b": ")?;
        self.value(v)
    }

    fn close_section(&mut self) -> io::Result<()> {
        if self.schema.current.is_some() {
            self.out.write_all(if self.rows_in_section == 0 {
                b"]"
            } else {
                b"\n]"
            })?;
        }
        Ok(())
    }
}

/// JSON value of one cell.
pub(crate) fn cell_value(c: &Cell) -> Value {
    match c {
        Cell::Text(s) => Value::String(s.clone()),
        Cell::List(v) => Value::Array(v.iter().cloned().map(Value::String).collect()),
        Cell::Int(i) => Value::from(*i),
        Cell::Num(x) => finite(*x).map_or(Value::Null, Value::from),
        Cell::Bool(b) => Value::Bool(*b),
        Cell::Empty => Value::Null,
    }
}

fn column_value(c: &Column) -> Value {
    serde_json::json!({
        "name": c.name,
        "key": c.key(),
        "unit": c.unit,
        "meaning": c.meaning,
    })
}

impl<W: Write> RowSink for JsonSink<W> {
    fn begin(&mut self, header: &Header, sections: &[Section]) -> io::Result<()> {
        if let Some(s) = sections.iter().find(|s| RESERVED.contains(&s.name)) {
            return Err(misuse(&format!(
                "section name `{}` is a reserved JSON member",
                s.name
            )));
        }
        self.schema.begin(sections)?;
        self.keys = sections
            .iter()
            .map(|s| {
                s.columns
                    .iter()
                    .map(|c| Value::String(c.key()).to_string())
                    .collect()
            })
            .collect();
        self.out.write_all(b"{\n")?;
        self.value("kinema_version")?;
        self.out.write_all(b": ")?;
        self.value(header.kinema_version)?;
        self.member("input", &header.input)?;
        self.member("points", &header.points)?;
        self.member("dimension", &header.dimension)?;
        self.member("method", &header.method)?;
        self.member("length_unit", header.length_unit.label())?;
        self.member("strain_unit", header.strain_unit.label())?;
        self.member("shear_convention", SHEAR_CONVENTION)?;
        self.member("angle_convention", ANGLE_CONVENTION)?;
        self.member("caution", CAUTION)?;
        let params: serde_json::Map<String, Value> = header
            .parameters
            .iter()
            .map(|(k, v)| (k.clone(), cell_value(v)))
            .collect();
        self.member("parameters", &params)?;
        let columns: serde_json::Map<String, Value> = sections
            .iter()
            .map(|s| {
                (
                    s.name.to_owned(),
                    Value::Array(s.columns.iter().map(column_value).collect()),
                )
            })
            .collect();
        self.member("columns", &columns)
    }

    fn section(&mut self, name: &str) -> io::Result<()> {
        self.close_section()?;
        self.schema.enter(name)?;
        self.out.write_all(b",\n")?;
        self.value(name)?;
        self.out.write_all(b": [")?;
        self.rows_in_section = 0;
        Ok(())
    }

    fn row(&mut self, cells: &[Cell]) -> io::Result<()> {
        self.schema.check_row(cells)?;
        let i = self.schema.current.unwrap_or(0);
        self.out.write_all(if self.rows_in_section == 0 {
            b"\n{"
        } else {
            b",\n{"
        })?;
        for (j, cell) in cells.iter().enumerate() {
            if j > 0 {
                self.out.write_all(b", ")?;
            }
            self.out.write_all(self.keys[i][j].as_bytes())?;
            self.out.write_all(b": ")?;
            let v = cell_value(cell);
            self.value(&v)?;
        }
        self.out.write_all(b"}")?;
        self.rows_in_section += 1;
        Ok(())
    }

    fn finish(&mut self, footer: &Footer) -> io::Result<()> {
        self.close_section()?;
        for i in self.schema.finish()? {
            let name = self.schema.sections[i].name;
            self.out.write_all(b",\n")?;
            self.value(name)?;
            self.out.write_all(b": []")?;
        }
        let by_reason: serde_json::Map<String, Value> = footer
            .rejected_by_reason
            .iter()
            .map(|(k, n)| (k.clone(), Value::from(*n)))
            .collect();
        let summary = serde_json::json!({
            "accepted": footer.accepted,
            "rejected": footer.rejected,
            "rejected_by_reason": by_reason,
            "notes": footer.notes,
        });
        self.member("summary", &summary)?;
        self.out.write_all(b"\n}\n")?;
        self.out.flush()
    }
}

#[cfg(test)]
mod tests {
    use super::super::sample;
    use super::*;

    #[test]
    fn round_trips_through_serde_json() {
        let mut s = JsonSink::new(Vec::new());
        sample::write(&mut s).expect("write");
        let text = String::from_utf8(s.into_inner()).expect("utf-8");
        assert!(!text.contains("NaN"), "{text}");
        let v: Value = serde_json::from_str(&text).expect("valid JSON");
        assert_eq!(v["method"], "delaunay");
        assert_eq!(v["length_unit"], "mm");
        assert_eq!(v["strain_unit"], "microstrain");
        assert_eq!(v["caution"], CAUTION);
        assert_eq!(v["shear_convention"], SHEAR_CONVENTION);
        assert_eq!(v["parameters"]["min_angle_deg"], 10.0);
        assert_eq!(v["columns"]["elements"][1]["key"], "exx_microstrain");
        assert_eq!(
            v["columns"]["elements"][2]["meaning"],
            "tensor shear strain exy = gxy/2"
        );
        let rows = v["elements"].as_array().expect("rows");
        assert_eq!(rows.len(), 2);
        assert_eq!(rows[0]["label"], "E1");
        assert_eq!(rows[0]["exx_microstrain"], 212.5);
        assert_eq!(rows[0]["exy_microstrain"], -0.1);
        assert_eq!(rows[0]["theta1_deg"], 33.25);
        assert_eq!(rows[0]["n_points"], 3);
        assert_eq!(rows[0]["exact"], true);
        assert_eq!(rows[1]["label"], "E2, \"quoted\"");
        assert_eq!(rows[1]["exx_microstrain"], 1.0e-7);
        assert!(rows[1]["exy_microstrain"].is_null(), "NaN becomes null");
        assert!(rows[1]["theta1_deg"].is_null());
        let rej = v["rejected"].as_array().expect("rejected");
        assert_eq!(rej.len(), 1);
        assert_eq!(rej[0]["members"], serde_json::json!(["T1", "T2", "T9"]));
        assert_eq!(v["summary"]["accepted"], 2);
        assert_eq!(v["summary"]["rejected"], 1);
        assert_eq!(v["summary"]["rejected_by_reason"]["minimum angle"], 1);
    }

    #[test]
    fn undeclared_entries_are_written_empty() {
        let mut s = JsonSink::new(Vec::new());
        s.begin(&sample::header(), &sample::sections())
            .expect("begin");
        s.finish(&Footer::default()).expect("finish");
        let v: Value = serde_json::from_slice(&s.into_inner()).expect("valid JSON");
        assert_eq!(v["elements"], serde_json::json!([]));
        assert_eq!(v["rejected"], serde_json::json!([]));
    }

    #[test]
    fn reserved_section_names_are_refused() {
        let mut s = JsonSink::new(Vec::new());
        let bad = [Section {
            name: "summary",
            columns: vec![],
        }];
        assert!(s.begin(&sample::header(), &bad).is_err());
    }
}
