//! Tables on a terminal narrower than they are: each row of a table that does not fit
//! becomes a block of `title  value` lines, so nothing wraps into a jumble. Pipes and
//! files keep the full table (the caller decides; see `cli::ReportOutput`).

use console::measure_text_width;

/// `text` with every box-drawn table wider than `width` columns laid out row by row:
/// the row's first non-empty cell as a heading (`stage: input`), then each other
/// non-empty cell under its column title. Narrow tables and all other lines stay.
pub fn fit_tables(text: &str, width: usize) -> String {
    let mut out = String::with_capacity(text.len());
    let mut table: Vec<&str> = Vec::new();
    for line in text.split_inclusive('\n') {
        let bare = line.trim_end_matches('\n');
        let start = bare.trim_start();
        if start.starts_with('┌') || !table.is_empty() {
            table.push(bare);
            if start.starts_with('└') {
                out.push_str(&fit_one(&table, width));
                table.clear();
            }
        } else {
            out.push_str(line);
        }
    }
    // A table cut short (no bottom border) is left as it was.
    for line in table {
        out.push_str(line);
        out.push('\n');
    }
    out
}

/// The cells of a `│ a │ b │` line.
fn cells(line: &str) -> Vec<&str> {
    let inner = line.trim().trim_start_matches('│').trim_end_matches('│');
    inner.split('│').map(str::trim).collect()
}

fn fit_one(table: &[&str], width: usize) -> String {
    let whole = || table.iter().map(|l| format!("{l}\n")).collect::<String>();
    // Only a box-drawn table is touched: every line a border or a row.
    let drawn = table
        .iter()
        .all(|l| l.trim_start().starts_with(['┌', '├', '└', '│']));
    if !drawn || table.iter().all(|l| measure_text_width(l) <= width) {
        return whole();
    }
    // An indented table keeps its indent.
    let indent = &table[0][..table[0].len() - table[0].trim_start().len()];
    let table: Vec<&str> = table.iter().map(|l| l.trim_start()).collect();
    // Titles: the rows above the first inner border; without one, no titles.
    let Some(border) = table.iter().position(|l| l.starts_with('├')) else {
        return whole();
    };
    let titles: Vec<&str> = match table[..border].iter().find(|l| l.starts_with('│')) {
        Some(l) => cells(l),
        None => return whole(),
    };
    let pad = titles
        .iter()
        .map(|t| measure_text_width(t))
        .max()
        .unwrap_or(0);
    let mut out = String::new();
    for line in table[border..].iter().filter(|l| l.starts_with('│')) {
        let row = cells(line);
        let mut first = true;
        for (title, cell) in titles.iter().zip(&row) {
            if cell.is_empty() {
                continue;
            }
            if first {
                out.push_str(&format!("{indent}{title}: {cell}\n"));
                first = false;
            } else {
                let gap = pad - measure_text_width(title);
                out.push_str(&format!("{indent}  {title}{}  {cell}\n", " ".repeat(gap)));
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    const TABLE: &str = "before\n┌───────┬──────┬────────┐\n│ stage │ I_C  │ gain   │\n├───────┼──────┼────────┤\n│ in    │ 1 mA │ -3 V/V │\n│       │ 2 mA │ 5 V/V  │\n└───────┴──────┴────────┘\nafter\n";

    #[test]
    fn a_table_that_fits_stays() {
        assert_eq!(fit_tables(TABLE, 80), TABLE);
    }

    #[test]
    fn a_wide_table_becomes_blocks_with_every_cell() {
        let narrow = fit_tables(TABLE, 20);
        assert_eq!(
            narrow,
            "before\nstage: in\n  I_C    1 mA\n  gain   -3 V/V\nI_C: 2 mA\n  gain   5 V/V\nafter\n"
        );
        assert!(narrow.lines().all(|l| measure_text_width(l) <= 20));
    }

    #[test]
    fn an_indented_table_keeps_its_indent() {
        let indented: String = TABLE
            .lines()
            .map(|l| {
                if l.contains('│') || l.starts_with(['┌', '├', '└']) {
                    format!("    {l}\n")
                } else {
                    format!("{l}\n")
                }
            })
            .collect();
        let narrow = fit_tables(&indented, 20);
        assert!(
            narrow.contains("    stage: in\n      I_C    1 mA\n"),
            "{narrow}"
        );
    }

    #[test]
    fn text_that_only_looks_like_a_table_stays() {
        // A CSV row whose first field starts with a box corner, and a later one
        // starting with the closing corner: not a table.
        let csv = "id,x\n┌odd,1\nplain,2\n└odd,3\n";
        assert_eq!(fit_tables(csv, 4), csv);
    }
}
