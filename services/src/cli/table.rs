//! Plain text tables: a header row, a rule, and rows with columns padded to a common width
//! (numbers aligned right, words left). No colours, so output can be piped or saved as is.

/// How a column is aligned.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Align {
    /// Text starts at the column's left edge.
    Left,
    /// Text ends at the column's right edge (for numbers).
    Right,
}

/// A table being built.
#[derive(Debug, Clone)]
pub struct Table {
    headers: Vec<String>,
    aligns: Vec<Align>,
    rows: Vec<Vec<String>>,
}

/// Space between two columns.
const GAP: &str = "  ";

impl Table {
    /// A table with these columns.
    pub fn new(columns: &[(&str, Align)]) -> Self {
        Self {
            headers: columns.iter().map(|(h, _)| (*h).to_owned()).collect(),
            aligns: columns.iter().map(|(_, a)| *a).collect(),
            rows: Vec::new(),
        }
    }

    /// Adds a row; missing cells are blank, extra cells are dropped.
    pub fn row(&mut self, cells: Vec<String>) {
        let mut cells = cells;
        cells.resize(self.headers.len(), String::new());
        self.rows.push(cells);
    }

    /// Number of rows added.
    pub fn len(&self) -> usize {
        self.rows.len()
    }

    /// True when no row was added.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// The table as lines of text, each ending in a newline; trailing spaces are trimmed.
    pub fn render(&self) -> String {
        let width = |s: &str| s.chars().count();
        let widths: Vec<usize> = (0..self.headers.len())
            .map(|c| self.rows.iter().map(|r| width(&r[c])).chain([width(&self.headers[c])]).max().unwrap_or(0))
            .collect();
        let line = |cells: &[String]| {
            let padded: Vec<String> = cells
                .iter()
                .zip(&widths)
                .zip(&self.aligns)
                .map(|((cell, &w), align)| match align {
                    Align::Left => format!("{cell:<w$}"),
                    Align::Right => format!("{cell:>w$}"),
                })
                .collect();
            let mut text = padded.join(GAP).trim_end().to_owned();
            text.push('\n');
            text
        };
        let mut out = line(&self.headers);
        let rule: Vec<String> = widths.iter().map(|w| "-".repeat(*w)).collect();
        out.push_str(&line(&rule));
        for row in &self.rows {
            out.push_str(&line(row));
        }
        out
    }
}

/// A number with `decimals` digits after the point; `-` when not finite.
pub fn number(value: f64, decimals: usize) -> String {
    if value.is_finite() {
        format!("{value:.decimals$}")
    } else {
        "-".to_owned()
    }
}

/// Digits after the point that show `value` with `significant` significant digits (at most
/// 12; 0 for zero or non-finite values).
pub fn decimals_for(value: f64, significant: usize) -> usize {
    if !(value.is_finite() && value != 0.0) {
        return 0;
    }
    let magnitude = value.abs().log10().floor() as i64;
    (significant as i64 - 1 - magnitude).clamp(0, 12) as usize
}

/// A value and its uncertainty with the same number of decimals, the value shown to three
/// significant digits: `0.000612 ± 0.000021`.
pub fn with_uncertainty(value: f64, uncertainty: f64) -> String {
    let decimals = decimals_for(value, 3);
    format!("{} ± {}", number(value, decimals), number(uncertainty, decimals))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_are_padded_to_the_widest_cell_and_numbers_align_right() {
        let mut table = Table::new(&[("vehicle", Align::Left), ("mm", Align::Right)]);
        table.row(vec!["bus-1".into(), number(7.26, 1)]);
        table.row(vec!["articulated-12".into(), number(12.0, 1)]);
        let text = table.render();
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(
            lines,
            vec![
                "vehicle           mm",
                "--------------  ----",
                "bus-1            7.3",
                "articulated-12  12.0",
            ]
        );
        assert_eq!(table.len(), 2);
    }

    #[test]
    fn short_rows_are_filled_and_unicode_counts_as_one_column_per_character() {
        let mut table = Table::new(&[("part", Align::Left), ("note", Align::Left), ("n", Align::Right)]);
        table.row(vec!["pad ±".into()]);
        table.row(vec!["rotor".into(), "past minimum".into(), "3".into()]);
        let text = table.render();
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[2], "pad ±", "blank cells leave no trailing spaces");
        assert_eq!(lines[3], "rotor  past minimum  3");
        assert_eq!(lines[0].find("note"), lines[3].find("past"));
    }

    #[test]
    fn small_rates_keep_three_significant_digits() {
        assert_eq!(with_uncertainty(0.000_612_4, 0.000_021), "0.000612 ± 0.000021");
        assert_eq!(with_uncertainty(12.345_6, 0.5), "12.3 ± 0.5");
        assert_eq!(with_uncertainty(0.0, 0.1), "0 ± 0");
        assert_eq!(decimals_for(f64::NAN, 3), 0);
    }

    #[test]
    fn non_finite_numbers_show_as_a_dash() {
        assert_eq!(number(f64::NAN, 2), "-");
        assert_eq!(number(f64::INFINITY, 0), "-");
        assert_eq!(number(2.346, 2), "2.35");
    }
}
