//! Streaming result writers: a readable table, CSV and JSON over one column schema.
//!
//! The caller declares every section and its columns up front ([`RowSink::begin`]),
//! then streams rows section by section ([`RowSink::section`], [`RowSink::row`]) and
//! ends with counts ([`RowSink::finish`]). No writer keeps more than a bounded number
//! of rows in memory (the table writer keeps the first [`table::WIDTH_SAMPLE`] rows of a
//! section to size its columns), so millions of element rows stream straight through.
//!
//! Units: every [`Column`] names its unit. Lengths are in the declared length unit,
//! strains in the declared strain unit, angles in degrees counter-clockwise from +x.
//! Shear is always labelled: tensor shear `exy` versus engineering shear `gxy = 2·exy`.

mod csv;
mod json;
mod table;

use std::io::{self, Write};

use clap::ValueEnum;
use kinema_core::estimate::Rejected;

pub use self::csv::CsvSink;
pub(crate) use self::csv::write_field;
pub use self::json::JsonSink;
pub use self::table::{TableSink, WIDTH_SAMPLE};
use crate::input::Points;
use crate::units::{LengthUnit, StrainUnit};

/// The caution printed with every result (table footer, JSON `caution`).
pub const CAUTION: &str = "Kinematic estimates from measured displacements, not a structural \
assessment; defer to local codes and licensed practice.";

/// How shear is named in every output.
pub const SHEAR_CONVENTION: &str = "exy, eyz, exz are tensor shear strains (half the angle \
change); gxy, gyz, gxz are engineering shear strains, gxy = 2*exy";

/// How angles are given in every output.
pub const ANGLE_CONVENTION: &str = "degrees, counter-clockwise from +x of the input frame";

/// Name of the section that lists screened-out regions.
pub const REJECTED: &str = "rejected";

/// Output format chosen with `--format`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum OutputFormat {
    /// Aligned columns for a terminal, with unit and convention lines.
    Table,
    /// One JSON document.
    Json,
    /// RFC 4180 CSV, column names suffixed with their unit; sections separated by an empty line.
    Csv,
}

/// One output column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Column {
    /// Short name, e.g. `exx`, `theta1`, `label`.
    pub name: &'static str,
    /// Unit label: `"m"`, `"mm"`, `"strain"`, `"microstrain"`, `"deg"`, `"rad"`, or `""`
    /// for text, counts, flags and dimensionless ratios.
    pub unit: &'static str,
    /// What the column holds, e.g. `"tensor shear strain exy = gxy/2"`.
    pub meaning: &'static str,
}

impl Column {
    /// A column.
    pub const fn new(name: &'static str, unit: &'static str, meaning: &'static str) -> Self {
        Self {
            name,
            unit,
            meaning,
        }
    }

    /// The name with its unit as suffix (`exx_microstrain`, `theta1_deg`), or the bare
    /// name when the unit is empty. Used as the CSV header and the JSON member name.
    pub fn key(&self) -> String {
        if self.unit.is_empty() {
            self.name.to_owned()
        } else {
            format!("{}_{}", self.name, self.unit)
        }
    }
}

/// One named section and its columns.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Section {
    /// Section name, e.g. `elements`, `groups`, `rejected` (a JSON member name).
    pub name: &'static str,
    /// Its columns, in order.
    pub columns: Vec<Column>,
}

/// The section for screened-out regions: `label`, `members`, `reason`.
pub fn rejected_section() -> Section {
    Section {
        name: REJECTED,
        columns: vec![
            Column::new("label", "", "element ID, group name or point ID"),
            Column::new("members", "", "point IDs of the region"),
            Column::new("reason", "", "why the region was rejected"),
        ],
    }
}

/// The cells of one row of [`rejected_section`].
pub fn rejected_row(label: String, member_ids: Vec<String>, reason: String) -> [Cell; 3] {
    [
        Cell::Text(label),
        Cell::List(member_ids),
        Cell::Text(reason),
    ]
}

/// The cells of one row of [`rejected_section`] for a region the core screened out:
/// member indices become point IDs (an index outside the set is shown as `#index`).
pub fn rejected_cells(points: &Points, r: &Rejected) -> [Cell; 3] {
    let ids = r
        .members
        .iter()
        .map(|&i| points.id(i).map_or_else(|| format!("#{i}"), str::to_owned))
        .collect();
    rejected_row(r.label.clone(), ids, r.reason.clone())
}

/// One cell value. Numbers are already in the column's unit.
#[derive(Debug, Clone, PartialEq)]
pub enum Cell {
    /// Text.
    Text(String),
    /// A list of identifiers (JSON array; space-separated in table and CSV, which is
    /// unambiguous because IDs cannot hold spaces).
    List(Vec<String>),
    /// An integer.
    Int(i64),
    /// A number; NaN and infinities are written as JSON `null` / an empty CSV field /
    /// `-` in the table, never as `NaN`.
    Num(f64),
    /// A flag.
    Bool(bool),
    /// No value.
    Empty,
}

/// What the run was: written at the top of every output.
#[derive(Debug, Clone, PartialEq)]
pub struct Header {
    /// Version of this program.
    pub kinema_version: &'static str,
    /// Input file as given.
    pub input: String,
    /// Number of points read, and their dimension (2 or 3).
    pub points: usize,
    /// 2 or 3.
    pub dimension: usize,
    /// Estimator name as on the command line (`delaunay`, `groups` …).
    pub method: String,
    /// Unit of all lengths written.
    pub length_unit: LengthUnit,
    /// Unit of all strains written.
    pub strain_unit: StrainUnit,
    /// Estimator parameters as used, each with its value (in the units shown in its name).
    pub parameters: Vec<(String, Cell)>,
}

impl Header {
    /// A header with this program's version and no parameters.
    pub fn new(
        input: impl Into<String>,
        points: usize,
        dimension: usize,
        method: impl Into<String>,
        length_unit: LengthUnit,
        strain_unit: StrainUnit,
    ) -> Self {
        Self {
            kinema_version: env!("CARGO_PKG_VERSION"),
            input: input.into(),
            points,
            dimension,
            method: method.into(),
            length_unit,
            strain_unit,
            parameters: Vec::new(),
        }
    }
}

/// Counts written at the end.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Footer {
    /// Regions with a result.
    pub accepted: u64,
    /// Regions screened out (listed in the `rejected` section).
    pub rejected: u64,
    /// Rejections counted by kind of reason, e.g. `("minimum angle", 12)`.
    pub rejected_by_reason: Vec<(String, u64)>,
    /// Further remarks for the reader (e.g. small-strain adequacy), one sentence each.
    pub notes: Vec<String>,
}

/// A streaming writer of sections of rows.
///
/// Call order: `begin` once; then for each section to fill, `section` followed by its
/// rows; then `finish` once. Sections declared in `begin` but never entered are
/// written empty. A row must have one cell per column of the current section.
pub trait RowSink {
    /// Write the header and remember the schema of every section.
    fn begin(&mut self, header: &Header, sections: &[Section]) -> io::Result<()>;
    /// Start writing rows of the declared section `name` (each section at most once).
    fn section(&mut self, name: &str) -> io::Result<()>;
    /// Write one row of the current section.
    fn row(&mut self, cells: &[Cell]) -> io::Result<()>;
    /// Write remaining empty sections and the footer, and flush.
    fn finish(&mut self, footer: &Footer) -> io::Result<()>;
}

/// A writer for `format` over `out` (wrap files and stdout in a `BufWriter`).
pub fn sink<'a, W: Write + 'a>(format: OutputFormat, out: W) -> Box<dyn RowSink + 'a> {
    match format {
        OutputFormat::Table => Box::new(TableSink::new(out)),
        OutputFormat::Json => Box::new(JsonSink::new(out)),
        OutputFormat::Csv => Box::new(CsvSink::new(out)),
    }
}

/// Bookkeeping shared by the writers: declared sections, which one is open, which
/// are done, and call-order checks (misuse is an `InvalidInput` I/O error, not a panic).
#[derive(Debug, Default)]
struct Schema {
    sections: Vec<Section>,
    done: Vec<bool>,
    current: Option<usize>,
    begun: bool,
    finished: bool,
}

impl Schema {
    fn begin(&mut self, sections: &[Section]) -> io::Result<()> {
        if self.begun {
            return Err(misuse("begin called twice"));
        }
        for (i, s) in sections.iter().enumerate() {
            if sections[..i].iter().any(|t| t.name == s.name) {
                return Err(misuse(&format!("section `{}` declared twice", s.name)));
            }
        }
        self.begun = true;
        self.sections = sections.to_vec();
        self.done = vec![false; sections.len()];
        Ok(())
    }

    /// Open section `name`; returns its index.
    fn enter(&mut self, name: &str) -> io::Result<usize> {
        if !self.begun || self.finished {
            return Err(misuse("section called outside begin … finish"));
        }
        let i = self
            .sections
            .iter()
            .position(|s| s.name == name)
            .ok_or_else(|| misuse(&format!("section `{name}` was not declared")))?;
        if self.done[i] {
            return Err(misuse(&format!("section `{name}` entered twice")));
        }
        if let Some(c) = self.current {
            self.done[c] = true;
        }
        self.done[i] = true;
        self.current = Some(i);
        Ok(i)
    }

    /// Columns of the open section, after checking the row length.
    fn check_row(&self, cells: &[Cell]) -> io::Result<&[Column]> {
        let i = self
            .current
            .filter(|_| !self.finished)
            .ok_or_else(|| misuse("row written outside a section"))?;
        let cols = &self.sections[i].columns;
        if cells.len() != cols.len() {
            return Err(misuse(&format!(
                "section `{}`: row has {} cells, the section has {} columns",
                self.sections[i].name,
                cells.len(),
                cols.len()
            )));
        }
        Ok(cols)
    }

    /// Mark finished; returns the indices of sections never entered.
    fn finish(&mut self) -> io::Result<Vec<usize>> {
        if !self.begun || self.finished {
            return Err(misuse("finish called without begin, or twice"));
        }
        self.finished = true;
        self.current = None;
        Ok((0..self.sections.len())
            .filter(|&i| !self.done[i])
            .collect())
    }
}

fn misuse(what: &str) -> io::Error {
    io::Error::new(
        io::ErrorKind::InvalidInput,
        format!("output writer: {what}"),
    )
}

/// A finite number, or `None` for NaN and infinities.
fn finite(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

/// Shortest text that reads back to the same `f64` (Rust's `Debug` for floats, which
/// switches to exponent form for very large and very small magnitudes).
fn round_trip(v: f64) -> String {
    let mut b = ryu::Buffer::new();
    b.format(v).to_owned()
}

/// Append the shortest text that reads back as exactly `v` (finite `v`) to `out`.
fn push_round_trip(out: &mut String, v: f64) {
    let mut b = ryu::Buffer::new();
    out.push_str(b.format(v));
}

#[cfg(test)]
pub(crate) mod sample {
    //! Two element rows and one rejected row, shared by the writer tests.
    use super::*;

    pub(crate) fn sections() -> Vec<Section> {
        vec![
            Section {
                name: "elements",
                columns: vec![
                    Column::new("label", "", "element ID"),
                    Column::new("exx", "microstrain", "normal strain along x"),
                    Column::new("exy", "microstrain", "tensor shear strain exy = gxy/2"),
                    Column::new("theta1", "deg", "direction of e1, CCW from +x"),
                    Column::new("n_points", "", "points used"),
                    Column::new("exact", "", "fit has no redundancy"),
                ],
            },
            rejected_section(),
        ]
    }

    pub(crate) fn header() -> Header {
        let mut h = Header::new(
            "wall.csv",
            3,
            2,
            "delaunay",
            LengthUnit::Millimetre,
            StrainUnit::Microstrain,
        );
        h.parameters = vec![("min_angle_deg".into(), Cell::Num(10.0))];
        h
    }

    pub(crate) fn rows() -> Vec<Vec<Cell>> {
        vec![
            vec![
                Cell::Text("E1".into()),
                Cell::Num(212.5),
                Cell::Num(-0.1),
                Cell::Num(33.25),
                Cell::Int(3),
                Cell::Bool(true),
            ],
            vec![
                Cell::Text("E2, \"quoted\"".into()),
                Cell::Num(1.0e-7),
                Cell::Num(f64::NAN),
                Cell::Empty,
                Cell::Int(3),
                Cell::Bool(false),
            ],
        ]
    }

    pub(crate) fn footer() -> Footer {
        Footer {
            accepted: 2,
            rejected: 1,
            rejected_by_reason: vec![("minimum angle".into(), 1)],
            notes: vec!["small-strain theory adequate in every element".into()],
        }
    }

    /// Write the sample through `sink`.
    pub(crate) fn write(sink: &mut dyn RowSink) -> io::Result<()> {
        sink.begin(&header(), &sections())?;
        sink.section("elements")?;
        for r in rows() {
            sink.row(&r)?;
        }
        sink.section(REJECTED)?;
        sink.row(&rejected_row(
            "E3".into(),
            vec!["T1".into(), "T2".into(), "T9".into()],
            "minimum angle 4.2 deg below 10 deg".into(),
        ))?;
        sink.finish(&footer())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keys_carry_units() {
        assert_eq!(
            Column::new("exx", "microstrain", "").key(),
            "exx_microstrain"
        );
        assert_eq!(Column::new("label", "", "").key(), "label");
    }

    #[test]
    fn round_trip_text_reads_back_exactly() {
        for v in [0.1, 1.0 / 3.0, 1e-300, 6.02214076e23, -2.5e-7, 123456.789] {
            assert_eq!(round_trip(v).parse::<f64>().expect("parses"), v);
        }
    }

    #[test]
    fn rejected_members_become_point_ids() {
        let set = kinema_core::PointSet::new(vec![
            kinema_core::Point::new("T1", [0.0, 0.0], [0.0, 0.0]),
            kinema_core::Point::new("T2", [1.0, 0.0], [0.0, 0.0]),
        ])
        .expect("valid");
        let r = Rejected {
            label: "E9".into(),
            members: vec![1, 0, 7],
            reason: "sliver".into(),
        };
        assert_eq!(
            rejected_cells(&Points::Plane(set), &r),
            [
                Cell::Text("E9".into()),
                Cell::List(vec!["T2".into(), "T1".into(), "#7".into()]),
                Cell::Text("sliver".into())
            ]
        );
    }

    #[test]
    fn misuse_is_an_error_not_a_panic() {
        let mut out = Vec::new();
        let mut s = JsonSink::new(&mut out);
        assert!(s.row(&[Cell::Int(1)]).is_err());
        s.begin(&sample::header(), &sample::sections())
            .expect("begin");
        assert!(s.section("nope").is_err());
        s.section("elements").expect("enter");
        assert!(s.row(&[Cell::Int(1)]).is_err(), "wrong cell count");
        assert!(s.section("elements").is_err(), "entered twice");
    }
}
