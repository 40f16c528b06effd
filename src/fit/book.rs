//! Reading a loan book: one CSV row per member loan, streamed into per-group outcomes.
//!
//! A lender's book can have millions of rows, so rows are never kept: each is checked, folded into
//! its group's running sums and dropped. What stays is one small record per group-cycle, the
//! interned ids and one 64-bit key per member-cycle (to refuse a member booked twice in a cycle).

use std::collections::{HashMap, HashSet};
use std::fmt;
use std::io::Read;
use std::path::Path;

/// Columns every loan book must have, in the order the error message lists them.
pub const REQUIRED_COLUMNS: [&str; 6] = ["cycle", "village", "group", "member", "due", "paid"];
/// The optional column with what the member paid herself, before any peer cover.
pub const OWN_PAID_COLUMN: &str = "own_paid";

/// Absolute slack for rounding of booked amounts: half a unit of the second decimal.
pub const ROUNDING: f64 = 0.005;
/// Relative slack for rounding of large amounts (floating-point sums of many cents).
const RELATIVE_ROUNDING: f64 = 1e-9;

/// How far an amount may exceed another and still count as equal after rounding.
fn slack(amount: f64) -> f64 {
    ROUNDING + RELATIVE_ROUNDING * amount.abs()
}

/// One refused record: enough to find and fix it in the file.
#[derive(Debug, Clone, PartialEq)]
pub struct BadRecord {
    /// The file as the user named it.
    pub file: String,
    /// 1-based line number in the file (the header is line 1).
    pub line: u64,
    /// The column the problem is in.
    pub column: String,
    /// The offending value as written (or a description when the value is absent).
    pub value: String,
    /// What the column allows.
    pub allowed: String,
}

impl fmt::Display for BadRecord {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}: line {}, column {}: value {} is not allowed: {}",
            self.file, self.line, self.column, self.value, self.allowed
        )
    }
}

/// Why a loan book could not be read at all.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BookError {
    /// A record (or the header) is invalid and bad rows are not being skipped.
    #[error("{0}")]
    Bad(Box<BadRecord>),
    /// The file cannot be opened or read.
    #[error("{file}: cannot read: {reason}")]
    Io {
        /// The file as the user named it.
        file: String,
        /// The operating system's reason.
        reason: String,
    },
}

/// The outcome of one group in one cycle, as the fit uses it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GroupOutcome {
    /// Index of the group's village-cycle in [`LoanBook::village_cycles`].
    pub village_cycle: u32,
    /// Number of members (loans) in the group.
    pub size: u32,
    /// Whether the group failed to repay without peer cover (see [`LoanBook`]).
    pub defaulted: bool,
}

/// A loan book reduced to group outcomes.
///
/// A group defaulted when the sum of `paid` is below the sum of `due` (beyond rounding). Where every
/// member row of a group carries `own_paid`, the outcome is instead whether every member paid her own
/// due herself, which is the outcome without peer cover that the fitted models describe.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct LoanBook {
    /// The file as the user named it.
    pub file: String,
    /// Data rows read (header excluded), bad ones included.
    pub rows_read: u64,
    /// Rows refused and skipped (only with skipping enabled).
    pub rows_skipped: u64,
    /// The first few skipped rows' messages, so the user can see what was dropped.
    pub skipped_examples: Vec<String>,
    /// Group outcomes, in order of first appearance.
    pub groups: Vec<GroupOutcome>,
    /// (village index, cycle) of each village-cycle, in order of first appearance.
    pub village_cycles: Vec<(u32, u64)>,
    /// Village ids, indexed by village index.
    pub villages: Vec<String>,
    /// Groups whose outcome came from `own_paid`.
    pub groups_with_own_paid: u64,
    /// Groups that defaulted with peer cover counted (sum of paid below sum of due).
    pub defaulted_with_cover: u64,
    /// Sum of `due` over all accepted rows.
    pub total_due: f64,
    /// Accepted rows.
    pub loans: u64,
}

/// How many skipped-row messages are kept as examples.
const SKIPPED_EXAMPLES: usize = 5;

/// Running state of one group-cycle while the book streams.
struct OpenGroup {
    village: u32,
    village_cycle: u32,
    members: u32,
    due: f64,
    paid: f64,
    rows_with_own_paid: u32,
    any_own_short: bool,
}

/// Reads a loan book from a file. With `skip_bad_rows`, invalid rows are counted and skipped;
/// otherwise the first one is refused. A bad header is always refused.
pub fn read_loan_book(path: &Path, skip_bad_rows: bool) -> Result<LoanBook, BookError> {
    let file = path.display().to_string();
    let handle = std::fs::File::open(path).map_err(|e| BookError::Io {
        file: file.clone(),
        reason: e.to_string(),
    })?;
    read_from(std::io::BufReader::with_capacity(1 << 16, handle), &file, skip_bad_rows)
}

/// Column positions found in the header.
struct Columns {
    index: [usize; 6],
    own_paid: Option<usize>,
    width: usize,
}

fn header_columns(headers: &csv::StringRecord, file: &str) -> Result<Columns, BookError> {
    let names: Vec<&str> = headers.iter().map(str::trim).collect();
    let bad = |column: &str, value: String, allowed: String| {
        BookError::Bad(Box::new(BadRecord {
            file: file.to_string(),
            line: 1,
            column: column.to_string(),
            value,
            allowed,
        }))
    };
    for (i, name) in names.iter().enumerate() {
        if !name.is_empty() && names[..i].contains(name) {
            return Err(bad(
                name,
                format!("\"{name}\" (a second time)"),
                "each column named once in the header".into(),
            ));
        }
    }
    let mut index = [0; 6];
    for (slot, required) in index.iter_mut().zip(REQUIRED_COLUMNS) {
        *slot = names.iter().position(|n| *n == required).ok_or_else(|| {
            bad(
                required,
                "missing from the header".into(),
                format!(
                    "a header with the columns {} ({OWN_PAID_COLUMN} optional, others ignored); found: {}",
                    REQUIRED_COLUMNS.join(", "),
                    names.join(", ")
                ),
            )
        })?;
    }
    Ok(Columns {
        index,
        own_paid: names.iter().position(|n| *n == OWN_PAID_COLUMN),
        width: names.len(),
    })
}

fn read_from(reader: impl Read, file: &str, skip_bad_rows: bool) -> Result<LoanBook, BookError> {
    let mut csv_reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .from_reader(reader);
    let header_error = |e: csv::Error| {
        BookError::Bad(Box::new(BadRecord {
            file: file.to_string(),
            line: 1,
            column: "(header)".into(),
            value: "unreadable".into(),
            allowed: format!("CSV text in UTF-8 ({e})"),
        }))
    };
    let headers = csv_reader.headers().map_err(header_error)?.clone();
    // A row that is not valid CSV text names the column of the offending field where it can.
    let io_error = |e: csv::Error| {
        let line = e.position().map_or(0, |p| p.line());
        let column = match e.kind() {
            csv::ErrorKind::Utf8 { err, .. } => headers.get(err.field()).unwrap_or("(unnamed)").trim().to_string(),
            _ => "(whole row)".into(),
        };
        BookError::Bad(Box::new(BadRecord {
            file: file.to_string(),
            line,
            column,
            value: "not valid UTF-8 text".into(),
            allowed: "CSV text in UTF-8".into(),
        }))
    };
    if headers.iter().all(|h| h.trim().is_empty()) {
        return Err(BookError::Bad(Box::new(BadRecord {
            file: file.to_string(),
            line: 1,
            column: "(header)".into(),
            value: "empty".into(),
            allowed: format!("a header with the columns {}", REQUIRED_COLUMNS.join(", ")),
        })));
    }
    let columns = header_columns(&headers, file)?;
    let mut book = LoanBook {
        file: file.to_string(),
        ..LoanBook::default()
    };
    let mut village_ids: HashMap<String, u32> = HashMap::new();
    let mut member_ids: HashMap<String, u32> = HashMap::new();
    let mut village_cycle_ids: HashMap<(u32, u64), u32> = HashMap::new();
    let mut group_ids: HashMap<(u64, Box<str>), u32> = HashMap::new();
    let mut member_cycles: HashSet<(u64, u32)> = HashSet::new();
    let mut open: Vec<OpenGroup> = Vec::new();
    let mut record = csv::StringRecord::new();
    loop {
        let line = match csv_reader.read_record(&mut record) {
            Ok(false) => break,
            Ok(true) => record.position().map_or(0, |p| p.line()),
            Err(e) => {
                // A row that is not valid CSV text is a bad record like any other.
                let e = io_error(e);
                book.rows_read += 1;
                if !skip_bad_rows {
                    return Err(e);
                }
                book.rows_skipped += 1;
                if book.skipped_examples.len() < SKIPPED_EXAMPLES {
                    book.skipped_examples.push(e.to_string());
                }
                continue;
            }
        };
        book.rows_read += 1;
        let outcome = accept_row(
            &record,
            line,
            file,
            &columns,
            &mut village_ids,
            &mut member_ids,
            &mut village_cycle_ids,
            &mut group_ids,
            &mut member_cycles,
            &mut open,
            &mut book,
        );
        if let Err(bad) = outcome {
            if !skip_bad_rows {
                return Err(BookError::Bad(Box::new(bad)));
            }
            book.rows_skipped += 1;
            if book.skipped_examples.len() < SKIPPED_EXAMPLES {
                book.skipped_examples.push(bad.to_string());
            }
        }
    }
    book.villages = vec![String::new(); village_ids.len()];
    for (name, id) in village_ids {
        book.villages[id as usize] = name;
    }
    book.groups = open
        .iter()
        .map(|g| {
            let with_cover = g.paid < g.due - slack(g.due) * f64::from(g.members);
            GroupOutcome {
                village_cycle: g.village_cycle,
                size: g.members,
                defaulted: if g.rows_with_own_paid == g.members {
                    g.any_own_short
                } else {
                    with_cover
                },
            }
        })
        .collect();
    book.groups_with_own_paid = open.iter().filter(|g| g.rows_with_own_paid == g.members).count() as u64;
    book.defaulted_with_cover = open
        .iter()
        .filter(|g| g.paid < g.due - slack(g.due) * f64::from(g.members))
        .count() as u64;
    Ok(book)
}

/// Checks one row and folds it into its group; nothing is changed when the row is refused.
#[allow(clippy::too_many_arguments)]
fn accept_row(
    record: &csv::StringRecord,
    line: u64,
    file: &str,
    columns: &Columns,
    village_ids: &mut HashMap<String, u32>,
    member_ids: &mut HashMap<String, u32>,
    village_cycle_ids: &mut HashMap<(u32, u64), u32>,
    group_ids: &mut HashMap<(u64, Box<str>), u32>,
    member_cycles: &mut HashSet<(u64, u32)>,
    open: &mut Vec<OpenGroup>,
    book: &mut LoanBook,
) -> Result<(), BadRecord> {
    let bad = |column: &str, value: &str, allowed: String| BadRecord {
        file: file.to_string(),
        line,
        column: column.to_string(),
        value: format!("\"{value}\""),
        allowed,
    };
    if record.len() < columns.width {
        let missing = REQUIRED_COLUMNS
            .iter()
            .zip(columns.index)
            .find(|(_, i)| *i >= record.len())
            .map_or(OWN_PAID_COLUMN, |(name, _)| *name);
        return Err(BadRecord {
            file: file.to_string(),
            line,
            column: missing.to_string(),
            value: "missing (the row is short)".into(),
            allowed: format!("{} fields per row, as in the header", columns.width),
        });
    }
    let field = |i: usize| record.get(i).unwrap_or("").trim();
    let [c_cycle, c_village, c_group, c_member, c_due, c_paid] = columns.index;
    let text = |name: &str, i: usize| -> Result<&str, BadRecord> {
        let v = field(i);
        if v.is_empty() {
            Err(bad(name, v, "a non-empty id".into()))
        } else {
            Ok(v)
        }
    };
    let cycle_text = field(c_cycle);
    let cycle: u64 = cycle_text
        .parse()
        .map_err(|_| bad("cycle", cycle_text, "a whole number >= 0".into()))?;
    let village = text("village", c_village)?;
    let group = text("group", c_group)?;
    let member = text("member", c_member)?;
    let amount = |name: &str, i: usize| -> Result<f64, BadRecord> {
        let v = field(i);
        match v.parse::<f64>() {
            Ok(x) if x.is_finite() && x >= 0.0 => Ok(x),
            Ok(x) if x.is_finite() => Err(bad(name, v, "an amount >= 0".into())),
            _ => Err(bad(name, v, "a finite number (an amount of money)".into())),
        }
    };
    let due = amount("due", c_due)?;
    if due == 0.0 {
        return Err(bad(
            "due",
            field(c_due),
            "an amount > 0 (a loan with nothing due)".into(),
        ));
    }
    let paid = amount("paid", c_paid)?;
    if paid > due + slack(due) {
        return Err(bad(
            "paid",
            field(c_paid),
            format!("at most the amount due ({due}) plus rounding ({ROUNDING})"),
        ));
    }
    let own_paid = match columns.own_paid {
        Some(i) if !field(i).is_empty() => {
            let v = amount(OWN_PAID_COLUMN, i)?;
            if v > due + slack(due) {
                return Err(bad(
                    OWN_PAID_COLUMN,
                    field(i),
                    format!("at most the amount due ({due}) plus rounding ({ROUNDING})"),
                ));
            }
            Some(v)
        }
        _ => None,
    };
    // Every check that can refuse the row comes before any state changes.
    let village_id = village_ids.get(village).copied();
    let group_index = group_ids.get(&(cycle, Box::from(group))).copied();
    if let Some(g) = group_index {
        let first = &open[g as usize];
        if Some(first.village) != village_id {
            let first_name = village_ids
                .iter()
                .find(|(_, id)| **id == first.village)
                .map_or("", |(n, _)| n.as_str());
            return Err(bad(
                "village",
                village,
                format!("the village of the group's other members in cycle {cycle}, \"{first_name}\""),
            ));
        }
    }
    let member_id = member_ids.get(member).copied();
    if let Some(m) = member_id
        && member_cycles.contains(&(cycle, m))
    {
        return Err(bad(
            "member",
            member,
            format!("one row per member and cycle, but this member already has a row in cycle {cycle}"),
        ));
    }
    let village_id = village_id.unwrap_or_else(|| {
        let id = village_ids.len() as u32;
        village_ids.insert(village.to_string(), id);
        id
    });
    let member_id = member_id.unwrap_or_else(|| {
        let id = member_ids.len() as u32;
        member_ids.insert(member.to_string(), id);
        id
    });
    member_cycles.insert((cycle, member_id));
    let g = match group_index {
        Some(g) => g as usize,
        None => {
            let next = village_cycle_ids.len() as u32;
            let vc = *village_cycle_ids.entry((village_id, cycle)).or_insert(next);
            if vc == next {
                book.village_cycles.push((village_id, cycle));
            }
            group_ids.insert((cycle, Box::from(group)), open.len() as u32);
            open.push(OpenGroup {
                village: village_id,
                village_cycle: vc,
                members: 0,
                due: 0.0,
                paid: 0.0,
                rows_with_own_paid: 0,
                any_own_short: false,
            });
            open.len() - 1
        }
    };
    let entry = &mut open[g];
    entry.members += 1;
    entry.due += due;
    entry.paid += paid;
    if let Some(own) = own_paid {
        entry.rows_with_own_paid += 1;
        entry.any_own_short |= own < due - slack(due);
    }
    book.total_due += due;
    book.loans += 1;
    Ok(())
}

/// Reads a loan book from text (for tests and tools that already hold the book in memory).
pub fn read_loan_book_str(text: &str, file: &str, skip_bad_rows: bool) -> Result<LoanBook, BookError> {
    read_from(text.as_bytes(), file, skip_bad_rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    const HEADER: &str = "cycle,village,group,member,due,paid\n";

    #[test]
    fn groups_default_when_their_sum_falls_short() {
        let text =
            format!("{HEADER}1,v1,g1,a,10,10\n1,v1,g1,b,10,4\n1,v1,g2,c,10,10\n1,v2,g3,d,10,10\n2,v1,g1,a,10,10\n");
        let book = read_loan_book_str(&text, "b.csv", false).unwrap();
        assert_eq!(book.groups.len(), 4);
        assert_eq!(book.village_cycles.len(), 3);
        let defaulted: Vec<bool> = book.groups.iter().map(|g| g.defaulted).collect();
        assert_eq!(defaulted, [true, false, false, false]);
        assert_eq!(book.groups[0].size, 2);
        assert_eq!(book.loans, 5);
    }

    #[test]
    fn own_paid_gives_the_outcome_without_peer_cover() {
        // own_paid above due is refused like paid above due.
        let text = "cycle,village,group,member,due,paid,own_paid,note\n1,v,g,a,10,10,6,x\n1,v,g,b,10,10,14,y\n";
        let e = read_loan_book_str(text, "b.csv", false).unwrap_err().to_string();
        assert!(e.contains("line 3, column own_paid: value \"14\""), "{e}");
        // The group's sums are complete (peers covered a's shortfall), but a paid only 6 herself.
        let text = "cycle,village,group,member,due,paid,own_paid\n1,v,g,a,10,10,6\n1,v,g,b,10,10,10\n";
        let book = read_loan_book_str(text, "b.csv", false).unwrap();
        assert!(book.groups[0].defaulted);
        assert_eq!(book.defaulted_with_cover, 0);
        assert_eq!(book.groups_with_own_paid, 1);
    }

    #[test]
    fn text_that_is_not_utf8_names_its_column() {
        let bytes = b"cycle,village,group,member,due,paid\n1,v\xff,g,a,10,10\n";
        let e = read_from(&bytes[..], "b.csv", false).unwrap_err().to_string();
        assert_eq!(
            e,
            "b.csv: line 2, column village: value not valid UTF-8 text is not allowed: CSV text in UTF-8"
        );
    }

    #[test]
    fn skipping_leaves_no_trace_of_a_refused_row() {
        let text = format!("{HEADER}1,v1,g1,a,10,10\n1,v2,g1,b,10,0\n1,v1,g1,a,10,0\n1,v1,g1,c,10,10\n");
        let e = read_loan_book_str(&text, "b.csv", false).unwrap_err().to_string();
        assert!(e.contains("line 3, column village"), "{e}");
        let book = read_loan_book_str(&text, "b.csv", true).unwrap();
        assert_eq!(book.rows_skipped, 2);
        assert_eq!(book.groups.len(), 1);
        assert_eq!(book.groups[0].size, 2);
        assert!(!book.groups[0].defaulted);
        assert_eq!(book.villages, ["v1"]);
    }
}
