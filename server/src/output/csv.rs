//! CSV writer: RFC 4180 (CRLF line ends, quoting where needed).
//!
//! Each section is one table whose first row holds the column keys with their unit
//! suffix (`exx_microstrain`, `theta1_deg`). Sections follow one another separated by
//! one empty line, in the order they are written; declared sections never entered
//! come last with their header only. Numbers use the shortest text that reads back
//! to the same double; NaN and infinities are written as an empty field.

use std::io::{self, Write};

use super::{Cell, Footer, Header, RowSink, Schema, Section, finite, push_round_trip};

/// Streaming CSV writer over any `io::Write`.
pub struct CsvSink<W: Write> {
    out: W,
    schema: Schema,
    tables_written: usize,
    field: Vec<String>,
    line: Vec<u8>,
}

impl<W: Write> CsvSink<W> {
    /// A writer over `out`.
    pub fn new(out: W) -> Self {
        Self {
            out,
            schema: Schema::default(),
            tables_written: 0,
            field: Vec::new(),
            line: Vec::new(),
        }
    }

    /// Give the underlying writer back.
    pub fn into_inner(self) -> W {
        self.out
    }

    /// Write one record: fields joined by commas, quoted where RFC 4180 needs it.
    fn record<S: AsRef<str>>(&mut self, fields: &[S]) -> io::Result<()> {
        // Assemble the line first and hand it over in one call: many small writes
        // into the buffered writer cost more than the formatting.
        let mut line = std::mem::take(&mut self.line);
        line.clear();
        for (i, f) in fields.iter().enumerate() {
            if i > 0 {
                line.push(b',');
            }
            write_field(&mut line, f.as_ref())?;
        }
        line.extend_from_slice(b"\r\n");
        let r = self.out.write_all(&line);
        self.line = line;
        r
    }

    fn start_table(&mut self, index: usize) -> io::Result<()> {
        if self.tables_written > 0 {
            self.out.write_all(b"\r\n")?;
        }
        self.tables_written += 1;
        let keys: Vec<String> = self.schema.sections[index]
            .columns
            .iter()
            .map(|c| c.key())
            .collect();
        self.record(&keys)
    }
}

/// One field, in double quotes (inner quotes doubled) when it holds a comma, a quote,
/// a line break or leading/trailing white space.
pub(crate) fn write_field(out: &mut impl Write, f: &str) -> io::Result<()> {
    let needs = f.contains([',', '"', '\r', '\n'])
        || f.starts_with(char::is_whitespace)
        || f.ends_with(char::is_whitespace);
    if !needs {
        return out.write_all(f.as_bytes());
    }
    out.write_all(b"\"")?;
    out.write_all(f.replace('"', "\"\"").as_bytes())?;
    out.write_all(b"\"")
}

fn cell_text(c: &Cell, buf: &mut String) {
    use std::fmt::Write as _;
    buf.clear();
    match c {
        Cell::Text(s) => buf.push_str(s),
        Cell::List(v) => {
            for (i, id) in v.iter().enumerate() {
                if i > 0 {
                    buf.push(' ');
                }
                buf.push_str(id);
            }
        }
        Cell::Int(i) => {
            let _ = write!(buf, "{i}");
        }
        Cell::Num(x) => {
            if let Some(x) = finite(*x) {
                push_round_trip(buf, x);
            }
        }
        Cell::Bool(b) => buf.push_str(if *b { "true" } else { "false" }),
        Cell::Empty => {}
    }
}

impl<W: Write> RowSink for CsvSink<W> {
    fn begin(&mut self, _header: &Header, sections: &[Section]) -> io::Result<()> {
        self.schema.begin(sections)
    }

    fn section(&mut self, name: &str) -> io::Result<()> {
        let i = self.schema.enter(name)?;
        self.start_table(i)
    }

    fn row(&mut self, cells: &[Cell]) -> io::Result<()> {
        self.schema.check_row(cells)?;
        // Numbers, flags and empty cells never need quoting: write them straight into
        // the line; only text goes through the quoting check.
        let mut line = std::mem::take(&mut self.line);
        let mut text = std::mem::take(&mut self.field);
        text.resize(1, String::new());
        line.clear();
        let mut ryu_buf = ryu::Buffer::new();
        for (i, c) in cells.iter().enumerate() {
            if i > 0 {
                line.push(b',');
            }
            match c {
                Cell::Num(x) => {
                    if let Some(x) = finite(*x) {
                        line.extend_from_slice(ryu_buf.format_finite(x).as_bytes());
                    }
                }
                Cell::Bool(b) => line.extend_from_slice(if *b { b"true" } else { b"false" }),
                Cell::Empty => {}
                Cell::Text(t) => write_field(&mut line, t)?,
                other => {
                    cell_text(other, &mut text[0]);
                    write_field(&mut line, &text[0])?;
                }
            }
        }
        line.extend_from_slice(b"\r\n");
        let r = self.out.write_all(&line);
        self.line = line;
        self.field = text;
        r
    }

    fn finish(&mut self, _footer: &Footer) -> io::Result<()> {
        for i in self.schema.finish()? {
            self.start_table(i)?;
        }
        self.out.flush()
    }
}

#[cfg(test)]
mod tests {
    use super::super::sample;
    use super::*;

    #[test]
    fn round_trips_through_the_csv_reader() {
        let mut s = CsvSink::new(Vec::new());
        sample::write(&mut s).expect("write");
        let text = String::from_utf8(s.into_inner()).expect("utf-8");
        let tables: Vec<&str> = text.split("\r\n\r\n").collect();
        assert_eq!(tables.len(), 2, "{text:?}");
        let mut rdr = csv::Reader::from_reader(tables[0].as_bytes());
        let head: Vec<String> = rdr
            .headers()
            .expect("header")
            .iter()
            .map(str::to_owned)
            .collect();
        assert_eq!(
            head,
            [
                "label",
                "exx_microstrain",
                "exy_microstrain",
                "theta1_deg",
                "n_points",
                "exact"
            ]
        );
        let rows: Vec<csv::StringRecord> = rdr.records().map(|r| r.expect("row")).collect();
        assert_eq!(rows.len(), 2);
        assert_eq!(&rows[0][0], "E1");
        assert_eq!(rows[0][1].parse::<f64>().expect("num"), 212.5);
        assert_eq!(rows[0][2].parse::<f64>().expect("num"), -0.1);
        assert_eq!(&rows[0][4], "3");
        assert_eq!(&rows[0][5], "true");
        assert_eq!(&rows[1][0], "E2, \"quoted\"", "quoting survives");
        assert_eq!(rows[1][1].parse::<f64>().expect("num"), 1.0e-7);
        assert_eq!(&rows[1][2], "", "NaN becomes an empty field");
        assert_eq!(&rows[1][3], "");
        let mut rdr = csv::Reader::from_reader(tables[1].as_bytes());
        assert_eq!(
            rdr.headers().expect("header").iter().collect::<Vec<_>>(),
            ["label", "members", "reason"]
        );
        let rej: Vec<csv::StringRecord> = rdr.records().map(|r| r.expect("row")).collect();
        assert_eq!(rej.len(), 1);
        assert_eq!(&rej[0][1], "T1 T2 T9");
        assert!(!text.contains("NaN"));
    }
}
