//! Snapshots and closes as CSV: one row per quote (or per close), a header row
//! naming the columns. A CSV snapshot becomes the same [`SnapshotDoc`] as JSON and is
//! validated the same way; every problem names its line and column.

use super::input::{
    too_many_expiries, validate_snapshot, PointDoc, PriceDoc, SliceDoc, SnapshotDoc, ValidSnapshot, MAX_EXPIRIES,
};
use super::path::{FieldPath, InputErrors, Problem, Segment};

/// Columns a snapshot CSV may have.
pub const SNAPSHOT_COLUMNS: [&str; 11] =
    ["underlying", "as_of", "expiry", "tau", "strike", "vol", "bid", "ask", "call", "put", "forward"];
/// The one more column: `discount`.
const DISCOUNT: &str = "discount";

/// `underlying` and `as_of` for a CSV without those columns (flags or query
/// parameters); a column, when present, must agree with these.
#[derive(Debug, Clone, Default)]
pub struct CsvHeader {
    /// Underlying name.
    pub underlying: Option<String>,
    /// Valuation time, RFC 3339.
    pub as_of: Option<String>,
}

/// A parsed CSV table: column names and rows with their line numbers.
struct Table {
    columns: Vec<String>,
    rows: Vec<(usize, Vec<String>)>,
}

fn read_table(text: &str, allowed: &[&str]) -> Result<Table, InputErrors> {
    let mut reader = csv::ReaderBuilder::new().has_headers(true).trim(csv::Trim::All).from_reader(text.as_bytes());
    let header = reader.headers().map_err(|e| InputErrors::malformed(FieldPath::csv(1, None), e.to_string()))?.clone();
    let columns: Vec<String> = header.iter().map(|c| c.to_ascii_lowercase()).collect();
    let mut problems = Vec::new();
    for (i, c) in columns.iter().enumerate() {
        if !allowed.contains(&c.as_str()) {
            problems.push(Problem {
                path: FieldPath::csv(1, Some(c)),
                message: format!("unknown column; expected some of {}", allowed.join(", ")),
            });
        }
        if columns[..i].contains(c) {
            problems.push(Problem { path: FieldPath::csv(1, Some(c)), message: "column given twice".into() });
        }
    }
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    let mut rows = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|e| {
            let line = e.position().map(|p| p.line() as usize).unwrap_or(0);
            InputErrors::malformed(FieldPath::csv(line, None), csv_problem(&e))
        })?;
        let line = record.position().map(|p| p.line() as usize).unwrap_or(0);
        if record.iter().all(str::is_empty) {
            continue;
        }
        rows.push((line, record.iter().map(str::to_string).collect()));
    }
    Ok(Table { columns, rows })
}

/// What is wrong with a row the CSV reader refused, in our words: a row with another
/// number of fields than the header, or text that is not UTF-8.
fn csv_problem(e: &csv::Error) -> String {
    match e.kind() {
        csv::ErrorKind::UnequalLengths { expected_len, len, .. } => {
            format!("the row has {len} fields where the header has {expected_len}")
        }
        csv::ErrorKind::Utf8 { .. } => "the row is not valid UTF-8 text".to_string(),
        _ => "the row could not be read as CSV".to_string(),
    }
}

impl Table {
    fn column(&self, name: &str) -> Option<usize> {
        self.columns.iter().position(|c| c == name)
    }
}

/// Reads one cell as a number: `None` when the column is absent or the cell empty.
fn number(row: &[String], column: Option<usize>, line: usize, name: &str, problems: &mut Vec<Problem>) -> Option<f64> {
    let text = row.get(column?)?;
    if text.is_empty() {
        return None;
    }
    match text.parse::<f64>() {
        Ok(x) => Some(x),
        Err(_) => {
            problems.push(Problem {
                path: FieldPath::csv(line, Some(name)),
                message: format!("must be a number, got {text:?}"),
            });
            None
        }
    }
}

fn text_cell(row: &[String], column: Option<usize>) -> Option<String> {
    row.get(column?).filter(|t| !t.is_empty()).cloned()
}

/// One value that must be the same on every row where it appears (underlying, as_of,
/// and per expiry forward and discount).
fn constant<T: PartialEq + std::fmt::Debug + Clone>(
    slot: &mut Option<T>,
    value: Option<T>,
    line: usize,
    name: &str,
    problems: &mut Vec<Problem>,
) {
    let Some(v) = value else { return };
    match slot {
        Some(existing) if *existing != v => problems.push(Problem {
            path: FieldPath::csv(line, Some(name)),
            message: format!("must be the same on every row it applies to: {existing:?} before, {v:?} here"),
        }),
        Some(_) => {}
        None => *slot = Some(v),
    }
}

/// Where each part of the built document came from, to name lines in errors.
struct Origins {
    /// Per slice: first line, and the line of each quote.
    slices: Vec<(usize, Vec<usize>)>,
}

impl Origins {
    /// Rewrites `slices[i].points[j].field` into `line L, column field`.
    fn locate(&self, path: &FieldPath) -> FieldPath {
        match path.0.as_slice() {
            [Segment::Field(s), Segment::Index(i), Segment::Field(q), Segment::Index(j), rest @ ..]
                if s == "slices" && (q == "points" || q == "prices") =>
            {
                let line = self.slices.get(*i).and_then(|(_, lines)| lines.get(*j)).copied().unwrap_or(0);
                column_path(line, rest)
            }
            [Segment::Field(s), Segment::Index(i), rest @ ..] if s == "slices" => {
                let line = self.slices.get(*i).map(|(first, _)| *first).unwrap_or(0);
                column_path(line, rest)
            }
            [Segment::Field(name)] => FieldPath::csv(self.slices.first().map(|s| s.0).unwrap_or(2), Some(name)),
            _ => path.clone(),
        }
    }
}

fn column_path(line: usize, rest: &[Segment]) -> FieldPath {
    match rest.first() {
        Some(Segment::Field(column)) => FieldPath::csv(line, Some(column)),
        _ => FieldPath::csv(line, None),
    }
}

/// The rows of one expiry of a CSV snapshot, gathered into a slice.
struct ExpiryRows {
    /// `expiry:<text>` or `tau:<number>`: rows with the same key are one expiry.
    key: String,
    expiry: Option<String>,
    tau: Option<f64>,
    forward: Option<f64>,
    discount: Option<f64>,
    points: Vec<PointDoc>,
    prices: Vec<PriceDoc>,
    first_line: usize,
    /// The line of each quote.
    lines: Vec<usize>,
}

/// Builds the snapshot document of a CSV table.
fn snapshot_doc(text: &str, header: &CsvHeader) -> Result<(SnapshotDoc, Origins), InputErrors> {
    let mut allowed: Vec<&str> = SNAPSHOT_COLUMNS.to_vec();
    allowed.push(DISCOUNT);
    let table = read_table(text, &allowed)?;
    check_columns(&table)?;
    let by_vol = table.column("vol").is_some();
    let mut problems = Vec::new();
    let mut underlying = header.underlying.clone();
    let mut as_of = header.as_of.clone();
    let mut groups: Vec<ExpiryRows> = Vec::new();
    for (line, row) in &table.rows {
        let line = *line;
        constant(&mut underlying, text_cell(row, table.column("underlying")), line, "underlying", &mut problems);
        constant(&mut as_of, text_cell(row, table.column("as_of")), line, "as_of", &mut problems);
        if let Some(index) = expiry_of_row(&table, row, line, &mut groups, &mut problems) {
            add_quote(&table, row, line, by_vol, &mut groups[index], &mut problems);
        }
    }
    if underlying.is_none() {
        problems.push(Problem {
            path: FieldPath::csv(1, Some("underlying")),
            message:
                "give an underlying column, or the underlying as --underlying (command line) or ?underlying= (service)"
                    .into(),
        });
    }
    if as_of.is_none() {
        problems.push(Problem {
            path: FieldPath::csv(1, Some("as_of")),
            message: "give an as_of column, or the valuation time as --as-of (command line) or ?as_of= (service)"
                .into(),
        });
    }
    if let Some(first_extra) = groups.get(MAX_EXPIRIES) {
        let column = if table.column("expiry").is_some() { "expiry" } else { "tau" };
        problems.push(Problem {
            path: FieldPath::csv(first_extra.first_line, Some(column)),
            message: too_many_expiries(groups.len()),
        });
    }
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    let origins = Origins { slices: groups.iter().map(|g| (g.first_line, g.lines.clone())).collect() };
    let slices = groups
        .into_iter()
        .map(|g| SliceDoc {
            expiry: g.expiry,
            tau: g.tau,
            forward: g.forward,
            discount: g.discount,
            points: by_vol.then_some(g.points),
            prices: (!by_vol).then_some(g.prices),
        })
        .collect();
    let doc = SnapshotDoc {
        underlying: underlying.unwrap_or_default(),
        as_of: as_of.unwrap_or_default(),
        spot: None,
        slices,
        smile: None,
        fit: None,
    };
    Ok((doc, origins))
}

/// The columns a snapshot table needs (a strike, an expiry or a tau, and vols or
/// prices, not both) and at least one quote.
fn check_columns(table: &Table) -> Result<(), InputErrors> {
    let col = |n: &str| table.column(n);
    let mut problems = Vec::new();
    if col("strike").is_none() {
        problems.push(Problem { path: FieldPath::csv(1, None), message: "needs a strike column".into() });
    }
    if col("expiry").is_none() && col("tau").is_none() {
        problems.push(Problem { path: FieldPath::csv(1, None), message: "needs an expiry or a tau column".into() });
    }
    let by_vol = col("vol").is_some();
    if !by_vol && col("call").is_none() && col("put").is_none() {
        problems.push(Problem {
            path: FieldPath::csv(1, None),
            message: "needs a vol column, or call and put columns".into(),
        });
    }
    if by_vol && (col("call").is_some() || col("put").is_some()) {
        problems
            .push(Problem { path: FieldPath::csv(1, None), message: "give vol or call/put columns, not both".into() });
    }
    if table.rows.is_empty() {
        problems.push(Problem { path: FieldPath::csv(2, None), message: "no quotes".into() });
    }
    if problems.is_empty() {
        Ok(())
    } else {
        Err(InputErrors::from_problems(problems))
    }
}

/// The index in `groups` of the expiry of a row (a new group for a new expiry); `None`,
/// with a problem, when the row gives neither or both of expiry and tau.
fn expiry_of_row(
    table: &Table,
    row: &[String],
    line: usize,
    groups: &mut Vec<ExpiryRows>,
    problems: &mut Vec<Problem>,
) -> Option<usize> {
    let expiry = text_cell(row, table.column("expiry"));
    let tau = number(row, table.column("tau"), line, "tau", problems);
    let key = match (&expiry, tau) {
        (Some(e), None) => format!("expiry:{e}"),
        (None, Some(t)) => format!("tau:{t}"),
        (Some(_), Some(_)) => {
            problems.push(Problem {
                path: FieldPath::csv(line, Some("tau")),
                message: "give expiry or tau, not both".into(),
            });
            return None;
        }
        (None, None) => {
            problems.push(Problem { path: FieldPath::csv(line, Some("expiry")), message: "give expiry or tau".into() });
            return None;
        }
    };
    if let Some(i) = groups.iter().position(|g| g.key == key) {
        return Some(i);
    }
    groups.push(ExpiryRows {
        key,
        expiry,
        tau,
        forward: None,
        discount: None,
        points: Vec::new(),
        prices: Vec::new(),
        first_line: line,
        lines: Vec::new(),
    });
    Some(groups.len() - 1)
}

/// Adds a row's forward, discount and quote (a vol with its bid and ask, or call and put
/// prices) to its expiry.
fn add_quote(
    table: &Table,
    row: &[String],
    line: usize,
    by_vol: bool,
    group: &mut ExpiryRows,
    problems: &mut Vec<Problem>,
) {
    let cell = |name: &str, problems: &mut Vec<Problem>| number(row, table.column(name), line, name, problems);
    let forward = cell("forward", problems);
    constant(&mut group.forward, forward, line, "forward", problems);
    let discount = cell(DISCOUNT, problems);
    constant(&mut group.discount, discount, line, DISCOUNT, problems);
    let Some(strike) = cell("strike", problems) else {
        problems.push(Problem { path: FieldPath::csv(line, Some("strike")), message: "missing".into() });
        return;
    };
    group.lines.push(line);
    if by_vol {
        let Some(vol) = cell("vol", problems) else {
            problems.push(Problem { path: FieldPath::csv(line, Some("vol")), message: "missing".into() });
            return;
        };
        let bid = cell("bid", problems);
        let ask = cell("ask", problems);
        group.points.push(PointDoc { strike, vol, bid, ask });
    } else {
        let call = cell("call", problems);
        let put = cell("put", problems);
        group.prices.push(PriceDoc { strike, call, put });
    }
}

/// Parses and validates a CSV snapshot; problems name line and column.
///
/// # Errors
/// [`InputErrors`] listing every problem.
pub fn parse_snapshot_csv(text: &str, header: &CsvHeader) -> Result<ValidSnapshot, InputErrors> {
    let (doc, origins) = snapshot_doc(text, header)?;
    validate_snapshot(&doc).map_err(|e| InputErrors {
        kind: e.kind,
        problems: e
            .problems
            .into_iter()
            .map(|p| Problem { path: origins.locate(&p.path), message: p.message })
            .collect(),
    })
}

/// Daily closes read from CSV (a `close` column, optionally `date`) or JSON.
#[derive(Debug, Clone, PartialEq)]
pub struct Closes {
    /// The closes in order.
    pub values: Vec<f64>,
}

/// Reads closes from CSV: a `close` column (and optionally `date`, which must
/// increase). An empty close is a gap; gaps and non-positive closes are errors naming
/// the line.
///
/// # Errors
/// [`InputErrors`] naming lines.
pub fn parse_closes_csv(text: &str) -> Result<Closes, InputErrors> {
    let table = read_table(text, &["date", "close"])?;
    let Some(close_col) = table.column("close") else {
        return Err(InputErrors::one(FieldPath::csv(1, None), "needs a close column"));
    };
    let date_col = table.column("date");
    let mut problems = Vec::new();
    let mut values = Vec::new();
    let mut previous_date: Option<String> = None;
    for (line, row) in &table.rows {
        match number(row, Some(close_col), *line, "close", &mut problems) {
            None if row.get(close_col).is_some_and(String::is_empty) => problems.push(Problem {
                path: FieldPath::csv(*line, Some("close")),
                message: "missing close (a gap in the series)".into(),
            }),
            None => {}
            Some(c) if !(c.is_finite() && c > 0.0) => problems.push(Problem {
                path: FieldPath::csv(*line, Some("close")),
                message: format!("must be positive, got {c}"),
            }),
            Some(c) => values.push(c),
        }
        if let Some(date) = text_cell(row, date_col) {
            if previous_date.as_ref().is_some_and(|p| *p >= date) {
                problems.push(Problem {
                    path: FieldPath::csv(*line, Some("date")),
                    message: format!("must be after the previous row's date, got {date}"),
                });
            }
            previous_date = Some(date);
        }
    }
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    if values.len() < 2 {
        return Err(InputErrors::one(
            FieldPath::csv(2, Some("close")),
            format!("needs at least 2 closes, got {}", values.len()),
        ));
    }
    Ok(Closes { values })
}

#[cfg(test)]
mod tests {
    use super::*;

    const CSV: &str = "underlying,as_of,expiry,strike,vol,bid,ask,forward,discount
KESTREL50,2026-11-30T15:30:00Z,2026-12-18T21:00:00Z,3800,0.31,0.305,0.315,4215.2,0.9975
KESTREL50,2026-11-30T15:30:00Z,2026-12-18T21:00:00Z,4200,0.21,,,4215.2,0.9975
KESTREL50,2026-11-30T15:30:00Z,2026-12-18T21:00:00Z,4600,0.18,,,4215.2,0.9975
KESTREL50,2026-11-30T15:30:00Z,2027-06-18T21:00:00Z,3800,0.27,,,4262,
KESTREL50,2026-11-30T15:30:00Z,2027-06-18T21:00:00Z,4200,0.22,,,4262,
KESTREL50,2026-11-30T15:30:00Z,2027-06-18T21:00:00Z,4600,0.19,,,4262,
";

    #[test]
    fn rows_group_into_slices_by_expiry() {
        let snapshot = parse_snapshot_csv(CSV, &CsvHeader::default()).expect("valid CSV");
        assert_eq!(snapshot.underlying, "KESTREL50");
        assert_eq!(snapshot.slices.len(), 2);
        assert_eq!(snapshot.expiries[1].as_deref(), Some("2027-06-18T21:00:00Z"));
    }

    #[test]
    fn problems_name_line_and_column() {
        let negative = CSV.replace("4200,0.21,", "4200,-0.21,");
        let err = parse_snapshot_csv(&negative, &CsvHeader::default()).expect_err("invalid");
        assert!(err.to_string().contains("line 3, column vol: must be positive"), "{err}");
        let inconsistent = CSV.replace("4600,0.19,,,4262,", "4600,0.19,,,4300,");
        let err = parse_snapshot_csv(&inconsistent, &CsvHeader::default()).expect_err("invalid");
        assert!(err.to_string().contains("line 7, column forward"), "{err}");
        let unknown = parse_snapshot_csv("strike,colour\n1,2\n", &CsvHeader::default()).expect_err("invalid");
        assert!(unknown.to_string().contains("line 1, column colour: unknown column"), "{unknown}");
    }

    #[test]
    fn header_values_come_from_flags_when_columns_are_absent() {
        let body = "tau,strike,vol,forward\n0.5,90,0.25,100\n0.5,100,0.2,100\n0.5,110,0.19,100\n";
        let header = CsvHeader { underlying: Some("HERON".into()), as_of: Some("2026-11-30T15:30:00Z".into()) };
        assert_eq!(parse_snapshot_csv(body, &header).expect("valid").underlying, "HERON");
        let missing = parse_snapshot_csv(body, &CsvHeader::default()).expect_err("no underlying");
        assert!(missing.to_string().contains("underlying"), "{missing}");
    }

    #[test]
    fn closes_with_gaps_and_bad_prices_name_the_line() {
        let ok = parse_closes_csv("date,close\n2026-11-02,100\n2026-11-03,101.5\n").expect("valid");
        assert_eq!(ok.values, vec![100.0, 101.5]);
        let err = parse_closes_csv("date,close\n2026-11-02,100\n2026-11-03,\n2026-11-04,-1\n2026-11-04,3\n")
            .expect_err("bad");
        let text = err.to_string();
        assert!(text.contains("line 3, column close: missing close"), "{text}");
        assert!(text.contains("line 4, column close: must be positive"), "{text}");
        assert!(text.contains("line 5, column date"), "{text}");
    }
}

#[cfg(test)]
mod media_type_tests {
    use super::CsvHeader;
    use crate::wire::SnapshotFormat;

    #[test]
    fn csv_media_types_carry_header_values_and_round_trip() {
        let format = SnapshotFormat::Csv(CsvHeader { underlying: Some("A \"B\"; C".into()), as_of: None });
        let media = format.media_type();
        match SnapshotFormat::from_media_type(&media) {
            Some(SnapshotFormat::Csv(h)) => assert_eq!(h.underlying.as_deref(), Some("A \"B\"; C")),
            other => panic!("{media}: {other:?}"),
        }
        assert!(matches!(SnapshotFormat::from_media_type("application/json"), Some(SnapshotFormat::Json)));
        assert!(SnapshotFormat::from_media_type("text/html").is_none());
    }
}
