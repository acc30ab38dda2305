//! Named numeric columns from a recorded CSV file, for `analyze relay` and `analyze
//! identify`: a header naming the columns (any order, case-insensitive, more allowed), lines
//! starting with `#` skipped, every asked-for field a finite number. Errors name the line
//! and the column. Read with the `csv` crate.

/// Why the columns could not be read; `line` is 1-based.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("line {line}: {message}")]
pub struct ColumnsError {
    pub line: u64,
    pub message: String,
}

/// The columns `names` of `text`, in that order.
///
/// # Errors
/// No header, a missing or repeated column, a short row or a field that is not a finite number.
pub fn read_columns(text: &str, names: &[&str]) -> Result<Vec<Vec<f64>>, ColumnsError> {
    let mut rdr = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let err = |line: u64, message: String| ColumnsError { line, message };
    let header: Vec<String> = rdr
        .headers()
        .map_err(|e| err(1, e.to_string()))?
        .iter()
        // Units in the names (`t_s`, `position_mm`, `duty_pct`) read as the plain words.
        .map(|n| crate::tuning::report::without_unit(&n.to_ascii_lowercase()))
        .collect();
    // The reader stands at the first data row: the header is the line before.
    let header_line = rdr.position().line().saturating_sub(1).max(1);
    let mut index = Vec::new();
    for want in names {
        let hits: Vec<usize> = (0..header.len()).filter(|&i| header[i] == *want).collect();
        match hits.as_slice() {
            [i] => index.push(*i),
            [] => {
                return Err(err(
                    header_line,
                    format!(
                        "missing column {want:?} (the header has: {}); expected {}",
                        header.join(","),
                        names.join(",")
                    ),
                ))
            }
            _ => return Err(err(header_line, format!("column {want:?} appears more than once"))),
        }
    }
    let mut cols = vec![Vec::new(); names.len()];
    for rec in rdr.records() {
        let rec =
            rec.map_err(|e| err(e.position().map_or(0, |p| p.line()), format!("not CSV: {e}")))?;
        let line = rec.position().map_or(0, |p| p.line());
        for (c, &i) in index.iter().enumerate() {
            let f = rec.get(i).ok_or_else(|| {
                err(
                    line,
                    format!("{} fields, column {:?} is number {}", rec.len(), names[c], i + 1),
                )
            })?;
            match f.parse::<f64>() {
                Ok(v) if v.is_finite() => cols[c].push(v),
                _ => {
                    return Err(err(
                        line,
                        format!("column {:?}: {f:?} is not a finite number", names[c]),
                    ))
                }
            }
        }
    }
    if cols[0].is_empty() {
        return Err(err(header_line, "no data rows after the header".to_owned()));
    }
    Ok(cols)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_in_any_order_with_comments() {
        let text = "# a relay record\nDuty,t,position,extra\n20,0.000,1.5,x\n-20,0.001,1.6,y\n";
        let c = read_columns(text, &["t", "position", "duty"]).expect("reads");
        assert_eq!(c, vec![vec![0.0, 0.001], vec![1.5, 1.6], vec![20.0, -20.0]]);
    }

    #[test]
    fn errors_name_the_line_and_the_column() {
        let e = read_columns("t,position\n0,1\n", &["t", "position", "duty"]).expect_err("no duty");
        assert!(e.message.contains("missing column \"duty\"") && e.line == 1, "{e}");
        let e = read_columns("t,position,duty\n0,1,2\n0.1,x,2\n", &["t", "position", "duty"])
            .expect_err("bad number");
        assert_eq!(e.line, 3, "{e}");
        assert!(e.message.contains("\"position\""), "{e}");
        assert!(read_columns("t,position,duty\n", &["t", "position", "duty"]).is_err());
    }
}
