//! Reading a synapse table (the format is in the module doc of [`super`]).

use super::SynapseError;
use rayon::prelude::*;
use rustc_hash::FxHashMap;
use std::collections::HashMap;
use std::path::Path;

/// Where a synapse is, as written in the table.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Location {
    /// An SWC id of the cell.
    Id(i64),
    /// A position in the cell file's units (before `--scale`).
    Pos([f64; 3]),
}

/// One synapse of the table.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Row {
    /// Line of the file (1-based).
    pub line: usize,
    /// Index into [`SynapseTable::inputs`].
    pub input: u32,
    pub location: Location,
    pub weight: f64,
}

/// A synapse table as read: the inputs in order of first appearance and one row per synapse.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SynapseTable {
    /// The file's name as given (for messages).
    pub file: String,
    pub inputs: Vec<String>,
    pub rows: Vec<Row>,
}

/// Reads and checks a synapse table file.
pub fn read_table(path: &Path) -> Result<SynapseTable, SynapseError> {
    let file = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|e| SynapseError::Io {
        file: file.clone(),
        message: e.to_string(),
    })?;
    parse_table(&bytes, &file)
}

/// Columns found in the header.
struct Columns {
    input: usize,
    id: Option<usize>,
    xyz: Option<[usize; 3]>,
    weight: Option<usize>,
    width: usize,
}

const INPUT_NAMES: [&str; 5] = ["input", "input_id", "pre", "pre_id", "presynaptic"];

fn columns(
    header: &csv::ByteRecord,
    bad: &dyn Fn(String) -> SynapseError,
) -> Result<Columns, SynapseError> {
    let mut found: HashMap<&str, usize> = HashMap::new();
    for (i, raw) in header.iter().enumerate() {
        let name = String::from_utf8_lossy(raw).trim().to_ascii_lowercase();
        let key = match name.as_str() {
            n if INPUT_NAMES.contains(&n) => "input",
            "swc_id" => "swc_id",
            "x" => "x",
            "y" => "y",
            "z" => "z",
            "weight" => "weight",
            _ => continue,
        };
        if found.insert(key, i).is_some() {
            return Err(bad(format!("the header names the {key} column twice")));
        }
    }
    let input = *found.get("input").ok_or_else(|| {
        bad(
            "the header has no `input` column (a table needs `input`, and `swc_id` or `x`, `y`, `z`)"
                .into(),
        )
    })?;
    let xyz = match (found.get("x"), found.get("y"), found.get("z")) {
        (Some(&x), Some(&y), Some(&z)) => Some([x, y, z]),
        (None, None, None) => None,
        _ => {
            return Err(bad(
                "the header has only some of the columns `x`, `y`, `z`".into()
            ));
        }
    };
    let id = found.get("swc_id").copied();
    match (id, xyz) {
        (Some(_), Some(_)) => Err(bad(
            "the header has both `swc_id` and `x`, `y`, `z`; give one location per table".into(),
        )),
        (None, None) => Err(bad(
            "the header has no location: add `swc_id`, or `x`, `y`, `z`".into(),
        )),
        _ => Ok(Columns {
            input,
            id,
            xyz,
            weight: found.get("weight").copied(),
            width: header.len(),
        }),
    }
}

/// Cuts a field quoted in a message to 40 characters.
fn quote(raw: &[u8]) -> String {
    let s = String::from_utf8_lossy(raw);
    let mut out: String = s.chars().take(40).collect();
    if s.chars().count() > 40 {
        out.push('…');
    }
    out
}

fn number(raw: &[u8], what: &str) -> Result<f64, String> {
    let s = std::str::from_utf8(raw).map_err(|_| format!("the {what} is not UTF-8 text"))?;
    let s = s.trim();
    match s.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(_) => Err(format!("the {what} `{}` is not finite", quote(raw))),
        Err(_) if s.is_empty() => Err(format!("the {what} is empty")),
        Err(_) => Err(format!("the {what} `{}` is not a number", quote(raw))),
    }
}

/// Counts lines from byte offsets of records, moving forwards only (one pass in all).
struct Lines<'a> {
    bytes: &'a [u8],
    at: usize,
    line: usize,
}

impl Lines<'_> {
    /// The line of the record whose reading began at `byte`: the reader's offset is where it
    /// began, so the blank and comment lines it passed over are skipped first (line ends \n,
    /// \r\n or \r, as the reader takes them). (The reader's own line count skips blank lines.)
    fn of(&mut self, byte: usize) -> usize {
        let b = self.bytes;
        let mut to = byte.clamp(self.at, b.len());
        while to < b.len() {
            match b[to] {
                b'\n' | b'\r' => to += 1,
                b'#' => {
                    while to < b.len() && !matches!(b[to], b'\n' | b'\r') {
                        to += 1;
                    }
                }
                _ => break,
            }
        }
        self.line += b[self.at..to].iter().filter(|&&c| c == b'\n').count();
        self.at = to;
        self.line
    }
}

fn reader(bytes: &[u8]) -> csv::Reader<&[u8]> {
    csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .comment(Some(b'#'))
        .from_reader(bytes)
}

/// One piece of the table's body, read on its own: rows with inputs numbered in the piece.
struct Piece {
    rows: Vec<Row>,
    names: Vec<String>,
}

fn row_error(file: &str, line: usize, message: String) -> SynapseError {
    SynapseError::Row {
        file: file.to_string(),
        line,
        message,
    }
}

/// Reads `bytes` (a run of whole lines starting on line `first_line`).
fn parse_piece(
    bytes: &[u8],
    first_line: usize,
    cols: &Columns,
    file: &str,
) -> Result<Piece, SynapseError> {
    let mut lines = Lines {
        bytes,
        at: 0,
        line: first_line,
    };
    let mut rdr = reader(bytes);
    let mut rec = csv::ByteRecord::new();
    let mut index: FxHashMap<Box<str>, u32> = FxHashMap::default();
    let mut piece = Piece {
        rows: Vec::new(),
        names: Vec::new(),
    };
    loop {
        match rdr.read_byte_record(&mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => {
                let at = e.position().map_or(0, |p| p.byte() as usize);
                return Err(row_error(
                    file,
                    lines.of(at),
                    format!("not readable as CSV: {e}"),
                ));
            }
        }
        let line = lines.of(rec.position().map_or(0, |p| p.byte() as usize));
        if rec.len() == 1 && rec[0].iter().all(u8::is_ascii_whitespace) {
            continue; // a line of spaces
        }
        let row = parse_row(&rec, cols, line, &mut index, &mut piece.names)
            .map_err(|m| row_error(file, line, m))?;
        piece.rows.push(row);
    }
    Ok(piece)
}

/// Splits `bytes[from..]` into about `n` runs of whole lines: (start, end, first line).
fn split_lines(
    bytes: &[u8],
    from: usize,
    first_line: usize,
    n: usize,
) -> Vec<(usize, usize, usize)> {
    let step = (bytes.len() - from).div_ceil(n.max(1)).max(1 << 16);
    let mut out = Vec::new();
    let (mut start, mut line) = (from, first_line);
    while start < bytes.len() {
        let mut end = (start + step).min(bytes.len());
        while end < bytes.len() && bytes[end - 1] != b'\n' {
            end += 1;
        }
        out.push((start, end, line));
        line += bytes[start..end].iter().filter(|&&c| c == b'\n').count();
        start = end;
    }
    out
}

/// Parses a synapse table held in memory (`file` names it in messages). Every fault is one
/// [`SynapseError::Row`] naming the line; the first in the file is reported. A table without
/// quotes is read in pieces of whole lines in parallel.
pub fn parse_table(bytes: &[u8], file: &str) -> Result<SynapseTable, SynapseError> {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let mut rdr = reader(bytes);
    let mut rec = csv::ByteRecord::new();
    let mut lines = Lines {
        bytes,
        at: 0,
        line: 1,
    };
    // the header: the first record
    let got = rdr.read_byte_record(&mut rec).map_err(|e| {
        let at = e.position().map_or(0, |p| p.byte() as usize);
        row_error(file, lines.of(at), format!("not readable as CSV: {e}"))
    })?;
    if !got {
        return Err(SynapseError::Table {
            file: file.to_string(),
            message: "the synapse table is empty (it needs a header line and one line per synapse)"
                .into(),
        });
    }
    let head_line = lines.of(rec.position().map_or(0, |p| p.byte() as usize));
    let cols = columns(&rec, &|m| row_error(file, head_line, m))?;
    let body = (rdr.position().byte() as usize).min(bytes.len());
    let body_line = head_line
        + bytes[lines.at..body]
            .iter()
            .filter(|&&c| c == b'\n')
            .count();
    let runs = if bytes[body..].contains(&b'"') {
        vec![(body, bytes.len(), body_line)] // a quoted field may hold a line break
    } else {
        split_lines(bytes, body, body_line, 4 * rayon::current_num_threads())
    };
    let pieces: Vec<Result<Piece, SynapseError>> = runs
        .par_iter()
        .map(|&(a, b, l)| parse_piece(&bytes[a..b], l, &cols, file))
        .collect();
    // inputs numbered in order of first appearance: piece by piece, each in its own order
    let mut table = SynapseTable {
        file: file.to_string(),
        ..SynapseTable::default()
    };
    let mut index: FxHashMap<String, u32> = FxHashMap::default();
    for piece in pieces {
        let piece = piece?;
        let global: Vec<u32> = piece
            .names
            .into_iter()
            .map(|name| {
                let next = table.inputs.len() as u32;
                *index.entry(name).or_insert_with_key(|n| {
                    table.inputs.push(n.clone());
                    next
                })
            })
            .collect();
        table.rows.extend(piece.rows.into_iter().map(|r| Row {
            input: global[r.input as usize],
            ..r
        }));
    }
    if table.rows.is_empty() {
        return Err(SynapseError::Table {
            file: file.to_string(),
            message: "the synapse table has a header but no synapses".into(),
        });
    }
    Ok(table)
}

fn parse_row(
    rec: &csv::ByteRecord,
    cols: &Columns,
    line: usize,
    index: &mut FxHashMap<Box<str>, u32>,
    inputs: &mut Vec<String>,
) -> Result<Row, String> {
    if rec.len() != cols.width {
        return Err(format!(
            "expected {} fields (as in the header), found {}",
            cols.width,
            rec.len()
        ));
    }
    let name = std::str::from_utf8(&rec[cols.input])
        .map_err(|_| "the input is not UTF-8 text".to_string())?
        .trim();
    if name.is_empty() {
        return Err("the input is empty".into());
    }
    let input = match index.get(name) {
        Some(&i) => i,
        None => {
            let i = u32::try_from(inputs.len()).map_err(|_| "more than 2^32 inputs".to_string())?;
            index.insert(name.into(), i);
            inputs.push(name.to_string());
            i
        }
    };
    let location = if let Some(c) = cols.id {
        let raw = &rec[c];
        let s = std::str::from_utf8(raw).unwrap_or("").trim();
        if s.is_empty() {
            return Err("the SWC id is empty".into());
        }
        let id = s
            .parse::<i64>()
            .map_err(|_| format!("the SWC id `{}` is not an integer", quote(raw)))?;
        Location::Id(id)
    } else {
        let [x, y, z] = cols.xyz.unwrap_or_default();
        Location::Pos([
            number(&rec[x], "x coordinate")?,
            number(&rec[y], "y coordinate")?,
            number(&rec[z], "z coordinate")?,
        ])
    };
    let weight = match cols.weight {
        Some(c) if !rec[c].iter().all(u8::is_ascii_whitespace) => {
            let w = number(&rec[c], "weight")?;
            if w <= 0.0 {
                return Err(format!("the weight {w} is not above 0"));
            }
            w
        }
        _ => 1.0,
    };
    Ok(Row {
        line,
        input,
        location,
        weight,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_inputs_in_order_and_skips_comments() {
        let t = parse_table(
            b"\xEF\xBB\xBF# made up\nsynapse,Input,X,y,z,weight\n1,\"b, c\",1,2,3,\n\n2,a,4,5,6,2.5\n3,\"b, c\",7,8,9,1\n",
            "t.csv",
        )
        .unwrap();
        assert_eq!(t.inputs, vec!["b, c".to_string(), "a".to_string()]);
        assert_eq!(t.rows.len(), 3);
        assert_eq!(t.rows[0].line, 3);
        assert_eq!(t.rows[1].line, 5);
        assert_eq!(t.rows[1].location, Location::Pos([4.0, 5.0, 6.0]));
        assert_eq!(t.rows[0].weight, 1.0);
        assert_eq!(t.rows[1].weight, 2.5);
        assert_eq!(t.rows[2].input, 0);
    }

    #[test]
    fn a_large_table_read_in_pieces_keeps_order_and_lines() {
        // 30 000 rows (several pieces of 64 KiB), with blank and comment lines mixed in
        let mut text = String::from("# big\ninput,swc_id,weight\n");
        let mut want_inputs: Vec<String> = Vec::new();
        let mut line = 2;
        for i in 0..30_000u64 {
            let name = format!("in-{}", (i * 7919) % 1013);
            if !want_inputs.contains(&name) {
                want_inputs.push(name.clone());
            }
            if i % 1000 == 999 {
                text.push_str("\n# note\n");
                line += 2;
            }
            text.push_str(&format!("{name},{},1\n", i + 1));
            line += 1;
        }
        let t = parse_table(text.as_bytes(), "big.csv").unwrap();
        assert!(text.len() > 4 << 16);
        assert_eq!(t.rows.len(), 30_000);
        assert_eq!(t.inputs, want_inputs);
        assert_eq!(t.rows.last().unwrap().line, line);
        assert!(
            t.rows
                .iter()
                .enumerate()
                .all(|(i, r)| r.location == Location::Id(i as i64 + 1))
        );
        // a fault near the end names its line
        let bad = text.replace(",29990,1", ",x,1");
        let n = bad.lines().position(|l| l.ends_with(",x,1")).unwrap() + 1;
        let e = parse_table(bad.as_bytes(), "big.csv").unwrap_err();
        assert_eq!(
            e.to_string(),
            format!("big.csv:{n}: the SWC id `x` is not an integer")
        );
    }

    #[test]
    fn bad_rows_name_their_line() {
        let e = parse_table(b"input,swc_id\na,1\nb,1.5\n", "t.csv").unwrap_err();
        assert_eq!(e.to_string(), "t.csv:3: the SWC id `1.5` is not an integer");
        let e = parse_table(b"input,x,y,z\na,1,2\n", "t.csv").unwrap_err();
        assert_eq!(
            e.to_string(),
            "t.csv:2: expected 4 fields (as in the header), found 3"
        );
    }
}
