//! Table writer: aligned columns for a terminal.
//!
//! The header states the input, method, units of lengths and strains, the shear and
//! angle conventions and the parameters. Each section lists its columns with unit and
//! meaning, then the rows under a two-line heading (names, then units). The footer
//! gives the counts and the caution line.
//!
//! Numbers are written with a fixed precision chosen by unit: microstrain 0.1, mm 0.01,
//! m 0.00001, deg 0.01, strain and rad in exponent form with 4 significant digits,
//! dimensionless values with 4 decimals (exponent form outside 1e-3 … 1e7).
//! NaN and infinities are shown as `-`.

use std::fmt::Write as _;
use std::io::{self, Write};

use super::{
    ANGLE_CONVENTION, CAUTION, Cell, Column, Footer, Header, RowSink, SHEAR_CONVENTION, Schema,
    Section,
};

/// Rows of a section held back to size its columns; later rows stream with those
/// widths (a wider cell then pushes its row out of line, nothing is cut).
pub const WIDTH_SAMPLE: usize = 1000;

/// Streaming table writer over any `io::Write`.
pub struct TableSink<W: Write> {
    out: W,
    schema: Schema,
    /// Formatted cells of held-back rows, and whether each cell is numeric.
    held: Vec<Vec<(String, bool)>>,
    /// Column widths and right alignment, once fixed for the open section.
    layout: Option<Vec<(usize, bool)>>,
    rows_in_section: u64,
}

impl<W: Write> TableSink<W> {
    /// A writer over `out`.
    pub fn new(out: W) -> Self {
        Self {
            out,
            schema: Schema::default(),
            held: Vec::new(),
            layout: None,
            rows_in_section: 0,
        }
    }

    /// Give the underlying writer back.
    pub fn into_inner(self) -> W {
        self.out
    }

    fn columns(&self) -> &[Column] {
        self.schema
            .current
            .map(|i| self.schema.sections[i].columns.as_slice())
            .unwrap_or(&[])
    }

    /// Fix the widths from the held rows, write the column heading and the held rows.
    fn fix_layout(&mut self) -> io::Result<()> {
        let cols = self.columns().to_vec();
        let mut layout: Vec<(usize, bool)> = cols
            .iter()
            .map(|c| (c.name.chars().count().max(c.unit.chars().count()), false))
            .collect();
        for row in &self.held {
            for (j, (text, numeric)) in row.iter().enumerate() {
                layout[j].0 = layout[j].0.max(text.chars().count());
                layout[j].1 |= *numeric;
            }
        }
        let names: Vec<String> = cols.iter().map(|c| c.name.to_owned()).collect();
        let units: Vec<String> = cols.iter().map(|c| c.unit.to_owned()).collect();
        write_line(&mut self.out, &layout, names.iter().map(String::as_str))?;
        if units.iter().any(|u| !u.is_empty()) {
            write_line(&mut self.out, &layout, units.iter().map(String::as_str))?;
        }
        for row in std::mem::take(&mut self.held) {
            write_line(&mut self.out, &layout, row.iter().map(|(t, _)| t.as_str()))?;
        }
        self.layout = Some(layout);
        Ok(())
    }

    /// Write out whatever of the open section is still held back.
    fn close_section(&mut self) -> io::Result<()> {
        if self.schema.current.is_some() {
            if self.layout.is_none() {
                self.fix_layout()?;
            }
            if self.rows_in_section == 0 {
                writeln!(self.out, "  (no rows)")?;
            }
        }
        self.layout = None;
        Ok(())
    }

    fn section_heading(&mut self, section: &Section) -> io::Result<()> {
        writeln!(self.out)?;
        writeln!(self.out, "{}", section.name)?;
        let unit = |c: &Column| {
            if c.unit.is_empty() {
                String::new()
            } else {
                format!("[{}]", c.unit)
            }
        };
        let w = section.columns.iter().map(|c| c.name.chars().count()).max();
        let uw = section
            .columns
            .iter()
            .map(|c| unit(c).chars().count())
            .max();
        let (w, uw) = (w.unwrap_or(0), uw.unwrap_or(0));
        for c in &section.columns {
            let line = format!("  {:<w$}  {:<uw$}  {}", c.name, unit(c), c.meaning);
            writeln!(self.out, "{}", line.trim_end())?;
        }
        writeln!(self.out)
    }
}

fn write_line<'a>(
    out: &mut impl Write,
    layout: &[(usize, bool)],
    cells: impl Iterator<Item = &'a str>,
) -> io::Result<()> {
    let mut line = String::with_capacity(128);
    for (j, text) in cells.enumerate() {
        let (w, right) = layout.get(j).copied().unwrap_or((0, false));
        if j > 0 {
            line.push_str("  ");
        }
        let pad = w.saturating_sub(text.chars().count());
        if right {
            line.extend(std::iter::repeat_n(' ', pad));
            line.push_str(text);
        } else {
            line.push_str(text);
            line.extend(std::iter::repeat_n(' ', pad));
        }
    }
    writeln!(out, "{}", line.trim_end())
}

/// Text of a number in a column of unit `unit`, with the precision described above.
pub(crate) fn format_number(v: f64, unit: &str) -> String {
    if !v.is_finite() {
        return "-".into();
    }
    match unit {
        "microstrain" => format!("{v:.1}"),
        "mm" => format!("{v:.2}"),
        "m" => format!("{v:.5}"),
        // Rigid rotations of structures are tiny (50 µrad ≈ 0.003°): keep five decimals
        // below one degree so they do not print as 0.00.
        "deg" if v.abs() < 1.0 => format!("{v:.5}"),
        "deg" => format!("{v:.2}"),
        "strain" | "rad" => format!("{v:.3e}"),
        _ => {
            let a = v.abs();
            if a != 0.0 && !(1e-3..1e7).contains(&a) {
                format!("{v:.3e}")
            } else {
                format!("{v:.4}")
            }
        }
    }
}

fn cell_text(c: &Cell, unit: &str) -> (String, bool) {
    match c {
        Cell::Text(s) => (s.clone(), false),
        Cell::List(v) => (v.join(" "), false),
        Cell::Int(i) => (i.to_string(), true),
        Cell::Num(x) => (format_number(*x, unit), true),
        Cell::Bool(b) => ((if *b { "yes" } else { "no" }).into(), false),
        Cell::Empty => (String::new(), false),
    }
}

impl<W: Write> RowSink for TableSink<W> {
    fn begin(&mut self, header: &Header, sections: &[Section]) -> io::Result<()> {
        self.schema.begin(sections)?;
        let o = &mut self.out;
        writeln!(o, "Kinema {} · kinema analyze", header.kinema_version)?;
        writeln!(
            o,
            "input:       {} ({} points, {}D)",
            header.input, header.points, header.dimension
        )?;
        writeln!(o, "method:      {}", header.method)?;
        writeln!(
            o,
            "length unit: {} (coordinates, displacements, distances)",
            header.length_unit.label()
        )?;
        writeln!(o, "strain unit: {}", header.strain_unit.label())?;
        writeln!(o, "shear:       {SHEAR_CONVENTION}")?;
        writeln!(o, "angles:      {ANGLE_CONVENTION}")?;
        if !header.parameters.is_empty() {
            let mut line = String::new();
            for (i, (k, v)) in header.parameters.iter().enumerate() {
                if i > 0 {
                    line.push_str(", ");
                }
                let _ = write!(line, "{k} = {}", parameter_text(v));
            }
            writeln!(o, "parameters:  {line}")?;
        }
        Ok(())
    }

    fn section(&mut self, name: &str) -> io::Result<()> {
        self.close_section()?;
        let i = self.schema.enter(name)?;
        let section = self.schema.sections[i].clone();
        self.section_heading(&section)?;
        self.rows_in_section = 0;
        Ok(())
    }

    fn row(&mut self, cells: &[Cell]) -> io::Result<()> {
        let cols = self.schema.check_row(cells)?;
        let formatted: Vec<(String, bool)> = cells
            .iter()
            .zip(cols)
            .map(|(c, col)| cell_text(c, col.unit))
            .collect();
        self.rows_in_section += 1;
        match &self.layout {
            Some(layout) => write_line(
                &mut self.out,
                layout,
                formatted.iter().map(|(t, _)| t.as_str()),
            ),
            None => {
                self.held.push(formatted);
                if self.held.len() >= WIDTH_SAMPLE {
                    self.fix_layout()?;
                }
                Ok(())
            }
        }
    }

    fn finish(&mut self, footer: &Footer) -> io::Result<()> {
        self.close_section()?;
        for i in self.schema.finish()? {
            let section = self.schema.sections[i].clone();
            self.section_heading(&section)?;
            writeln!(self.out, "  (no rows)")?;
        }
        writeln!(self.out)?;
        let mut counts = format!(
            "accepted: {}, rejected: {}",
            footer.accepted, footer.rejected
        );
        if !footer.rejected_by_reason.is_empty() {
            let parts: Vec<String> = footer
                .rejected_by_reason
                .iter()
                .map(|(r, n)| format!("{r}: {n}"))
                .collect();
            let _ = write!(counts, " ({})", parts.join(", "));
        }
        writeln!(self.out, "{counts}")?;
        for n in &footer.notes {
            writeln!(self.out, "note: {n}")?;
        }
        writeln!(self.out, "{CAUTION}")?;
        self.out.flush()
    }
}

fn parameter_text(c: &Cell) -> String {
    match c {
        Cell::Num(x) if x.is_finite() => super::round_trip(*x),
        other => cell_text(other, "").0,
    }
}

#[cfg(test)]
mod tests {
    use super::super::sample;
    use super::*;

    fn render() -> String {
        let mut s = TableSink::new(Vec::new());
        sample::write(&mut s).expect("write");
        String::from_utf8(s.into_inner()).expect("utf-8")
    }

    #[test]
    fn states_units_conventions_counts_and_caution() {
        let t = render();
        assert!(t.contains("length unit: mm"), "{t}");
        assert!(t.contains("strain unit: microstrain"), "{t}");
        assert!(t.contains(SHEAR_CONVENTION), "{t}");
        assert!(
            t.contains("exy       [microstrain]  tensor shear strain exy = gxy/2"),
            "{t}"
        );
        assert!(
            t.contains("theta1    [deg]          direction of e1"),
            "{t}"
        );
        assert!(t.contains("parameters:  min_angle_deg = 10.0"), "{t}");
        assert!(
            t.contains("accepted: 2, rejected: 1 (minimum angle: 1)"),
            "{t}"
        );
        assert!(t.trim_end().ends_with(CAUTION), "{t}");
        assert!(!t.contains("NaN"), "{t}");
    }

    #[test]
    fn rows_are_aligned_with_fixed_precision() {
        let t = render();
        let lines: Vec<&str> = t.lines().collect();
        let head = lines
            .iter()
            .position(|l| l.starts_with("label"))
            .expect("heading row");
        let e1 = lines[head + 2];
        let e2 = lines[head + 3];
        assert!(e1.starts_with("E1 "), "{e1}");
        assert!(e2.starts_with("E2, \"quoted\""), "{e2}");
        // Numbers are right-aligned: the exx values end in the same column.
        let end = |line: &str, needle: &str| line.find(needle).map(|i| i + needle.len());
        assert_eq!(end(e1, "212.5"), end(e2, "0.0"), "{e1}\n{e2}");
        assert!(e1.contains("33.25") && e1.contains("-0.1") && e1.contains("yes"));
        assert!(e2.contains(" - "), "NaN shown as -: {e2}");
        assert!(
            t.contains("E3     T1 T2 T9  minimum angle 4.2 deg below 10 deg"),
            "{t}"
        );
    }

    #[test]
    fn precision_by_unit() {
        assert_eq!(format_number(212.54, "microstrain"), "212.5");
        assert_eq!(format_number(0.0125, "m"), "0.01250");
        assert_eq!(format_number(12.5, "mm"), "12.50");
        assert_eq!(format_number(2.125e-4, "strain"), "2.125e-4");
        assert_eq!(format_number(1.5, ""), "1.5000");
        assert_eq!(format_number(2.0e-6, ""), "2.000e-6");
        assert_eq!(format_number(f64::INFINITY, "deg"), "-");
        assert_eq!(format_number(-24.294, "deg"), "-24.29");
        assert_eq!(format_number(0.0028648, "deg"), "0.00286");
    }
}
