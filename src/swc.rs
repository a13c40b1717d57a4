//! SWC reader, validator and writer.
//!
//! The format: one point per line, seven columns `id type x y z radius parent`, parent -1 for a
//! root (Cannon, Turner, Pyapali & Wheal 1998, J. Neurosci. Methods 84:49–54). `#` starts a
//! comment. This module reads the text into [`SwcPoint`]s and checks every line; tree-level checks
//! (missing parents, cycles) live in [`crate::morphology`], which builds the tree.
//!
//! Every error names the file, the line and the fault ([`SwcError`]); nothing here panics on input.

use std::fmt::Write as _;
use std::path::Path;

/// One SWC line.
#[derive(Debug, Clone, PartialEq)]
pub struct SwcPoint {
    /// The point's id (column 1).
    pub id: i64,
    /// The type code (column 2): 1 soma, 2 axon, 3 basal dendrite, 4 apical dendrite,
    /// 5 fork point, 6 end point (both neurite points), others custom.
    pub kind: i32,
    /// Position in µm (columns 3–5).
    pub pos: [f64; 3],
    /// Radius in µm (column 6); `None` where the file says `NA`.
    pub radius: Option<f64>,
    /// The parent's id (column 7), -1 for a root.
    pub parent: i64,
    /// 1-based line number in the source file.
    pub line: usize,
}

impl SwcPoint {
    /// Appends a point to a file being generated, numbered after the last (id = line =
    /// count + 1, so ids are dense and parents come first), and returns its id.
    pub fn append(
        pts: &mut Vec<SwcPoint>,
        kind: i32,
        pos: [f64; 3],
        radius: f64,
        parent: i64,
    ) -> i64 {
        let id = pts.len() as i64 + 1;
        pts.push(SwcPoint {
            id,
            kind,
            pos,
            radius: Some(radius),
            parent,
            line: id as usize,
        });
        id
    }
}

/// A warning about a file that was still accepted. `code` is a short stable name
/// (for tests and for filtering), `message` a sentence for people.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Warning {
    pub code: &'static str,
    /// The line it names; left out of JSON when the warning is about the whole file.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub line: Option<usize>,
    pub message: String,
}

impl Warning {
    pub fn new(code: &'static str, line: Option<usize>, message: impl Into<String>) -> Self {
        Warning {
            code,
            line,
            message: message.into(),
        }
    }
}

impl std::fmt::Display for Warning {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.line {
            Some(l) => write!(f, "line {l}: {} [{}]", self.message, self.code),
            None => write!(f, "{} [{}]", self.message, self.code),
        }
    }
}

/// What is wrong with a file that cannot be read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum Fault {
    #[error("cannot read the file: {0}")]
    Io(String),
    #[error("the file is not UTF-8 text (a bad byte at byte offset {0})")]
    NotUtf8(usize),
    #[error("the file holds no points")]
    Empty,
    #[error("expected 7 columns (id type x y z radius parent), found {0}")]
    TooFewColumns(usize),
    #[error("column {column} ({name}) is not a number: {text:?}")]
    NotANumber {
        column: usize,
        name: &'static str,
        text: String,
    },
    #[error("column {column} ({name}) is not finite: {text:?}")]
    NotFinite {
        column: usize,
        name: &'static str,
        text: String,
    },
    #[error("column {column} ({name}) must be a whole number, found {text:?}")]
    NotAnInteger {
        column: usize,
        name: &'static str,
        text: String,
    },
    #[error("{name} {text} is out of range ({rule})")]
    OutOfRange {
        name: &'static str,
        text: String,
        rule: &'static str,
    },
    #[error("the radius is negative: {0}")]
    NegativeRadius(f64),
    #[error("id {id} is used twice (first on line {first_line})")]
    DuplicateId { id: i64, first_line: usize },
    #[error("point {id} names parent {parent}, which is not in the file")]
    MissingParent { id: i64, parent: i64 },
    #[error("point {0} is its own parent")]
    OwnParent(i64),
    #[error("the parent links form a cycle through point {0}")]
    Cycle(i64),
}

/// An SWC file that cannot be used: the file, the 1-based line (when one line is at fault) and
/// what is wrong.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{file}{}: {fault}", line.map(|l| format!(":{l}")).unwrap_or_default())]
pub struct SwcError {
    pub file: String,
    pub line: Option<usize>,
    pub fault: Fault,
}

/// The points and warnings of a file that passed the line-level checks.
#[derive(Debug, Clone, Default)]
pub struct SwcFile {
    /// Where it came from (a path, or a name such as `<demo>`), used in messages.
    pub source: String,
    pub points: Vec<SwcPoint>,
    /// Comment lines (without the leading `#`), in order.
    pub header: Vec<String>,
    pub warnings: Vec<Warning>,
}

const NAMES: [&str; 7] = ["id", "type", "x", "y", "z", "radius", "parent"];

/// Reads and checks an SWC file from disk.
pub fn read_path(path: &Path) -> Result<SwcFile, SwcError> {
    let file = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|e| SwcError {
        file: file.clone(),
        line: None,
        fault: Fault::Io(e.to_string()),
    })?;
    parse_bytes(&bytes, &file)
}

/// Checks that `bytes` are UTF-8 and parses them; `source` names the file in messages.
pub fn parse_bytes(bytes: &[u8], source: &str) -> Result<SwcFile, SwcError> {
    match std::str::from_utf8(bytes) {
        Ok(text) => parse_str(text, source),
        Err(e) => {
            let at = e.valid_up_to();
            let line = bytes[..at].iter().filter(|&&b| b == b'\n').count() + 1;
            Err(SwcError {
                file: source.to_string(),
                line: Some(line),
                fault: Fault::NotUtf8(at),
            })
        }
    }
}

/// Parses SWC text; `source` names the file in messages. Three stages: each line is cut into
/// its columns ([`columns`]), each point line read into a point ([`point`]), and the warnings
/// about the whole file gathered at the end ([`file_warnings`]).
pub fn parse_str(text: &str, source: &str) -> Result<SwcFile, SwcError> {
    // A byte-order mark (as some Windows editors write) is not part of the first line.
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut out = SwcFile {
        source: source.to_string(),
        ..Default::default()
    };
    // one point per line at most: reserving once avoids copying a large file's points as the
    // vector grows (the count is a fast byte scan)
    out.points.reserve(count_newlines(text.as_bytes()) + 1);
    let mut extra_columns: Option<(usize, usize)> = None; // (first line, count of lines)
    let mut float_ids: Option<usize> = None;
    let err = |line: usize, fault: Fault| SwcError {
        file: source.to_string(),
        line: Some(line),
        fault,
    };
    for (i, raw) in text.split('\n').enumerate() {
        let lineno = i + 1;
        let (fields, extra) = match columns(raw, &mut out.header) {
            Ok(None) => continue,
            Ok(Some(c)) => c,
            Err(f) => return Err(err(lineno, f)),
        };
        if extra {
            extra_columns = Some(match extra_columns {
                Some((first, count)) => (first, count + 1),
                None => (lineno, 1),
            });
        }
        let p = point(&fields, lineno, &mut float_ids).map_err(|f| err(lineno, f))?;
        out.points.push(p);
    }
    if out.points.is_empty() {
        return Err(SwcError {
            file: source.to_string(),
            line: None,
            fault: Fault::Empty,
        });
    }
    file_warnings(&mut out, extra_columns, float_ids);
    Ok(out)
}

/// Stage 1: one line (without its `\n`; a `\r` before it is dropped) → its seven columns and
/// whether it had more, or `None` for a line without columns. A `#` starts a comment, which is
/// kept in `header`.
fn columns<'t>(
    raw: &'t str,
    header: &mut Vec<String>,
) -> Result<Option<([&'t str; 7], bool)>, Fault> {
    let raw = raw.strip_suffix('\r').unwrap_or(raw);
    let content = match raw.find('#') {
        Some(at) => {
            header.push(raw[at + 1..].trim_end().to_string());
            &raw[..at]
        }
        None => raw,
    };
    let mut cols = content.split_ascii_whitespace();
    let mut fields: [&str; 7] = [""; 7];
    let mut n = 0;
    for f in cols.by_ref().take(7) {
        fields[n] = f;
        n += 1;
    }
    match n {
        0 => Ok(None),
        1..=6 => Err(Fault::TooFewColumns(n)),
        _ => Ok(Some((fields, cols.next().is_some()))),
    }
}

/// Stage 2: the seven columns of line `lineno` → a point, with every range check of one line
/// (ids ≥ 0, a 32-bit type, finite coordinates, a radius ≥ 0 or NA, parent −1 or an id other
/// than its own). `float_ids` records the first line whose integers were written as decimals.
fn point(
    fields: &[&str; 7],
    lineno: usize,
    float_ids: &mut Option<usize>,
) -> Result<SwcPoint, Fault> {
    let id = parse_int(fields[0], 0, float_ids, lineno)?;
    if id < 0 {
        return Err(Fault::OutOfRange {
            name: "id",
            text: shown(fields[0]),
            rule: "ids are 0 or more",
        });
    }
    let kind = parse_int(fields[1], 1, float_ids, lineno)?;
    let kind = i32::try_from(kind).map_err(|_| Fault::OutOfRange {
        name: "type",
        text: shown(fields[1]),
        rule: "a type code fits in 32 bits",
    })?;
    let mut pos = [0.0; 3];
    for (c, p) in pos.iter_mut().enumerate() {
        *p = parse_float(fields[2 + c], 2 + c)?;
    }
    let radius = if fields[5] == "NA" {
        None
    } else {
        let r = parse_float(fields[5], 5)?;
        if r < 0.0 {
            return Err(Fault::NegativeRadius(r));
        }
        Some(r)
    };
    let parent = parse_int(fields[6], 6, float_ids, lineno)?;
    if parent < -1 {
        return Err(Fault::OutOfRange {
            name: "parent",
            text: shown(fields[6]),
            rule: "a parent is -1 (a root) or an id",
        });
    }
    if parent == id {
        return Err(Fault::OwnParent(id));
    }
    Ok(SwcPoint {
        id,
        kind,
        pos,
        radius,
        parent,
        line: lineno,
    })
}

/// Stage 3: warnings about the whole file (extra columns, integers written as decimals,
/// unknown radii), each naming its first line.
fn file_warnings(
    out: &mut SwcFile,
    extra_columns: Option<(usize, usize)>,
    float_ids: Option<usize>,
) {
    if let Some((first, count)) = extra_columns {
        out.warnings.push(Warning::new(
            "extra-columns",
            Some(first),
            format!("{count} line(s) have more than 7 columns; the extra columns are ignored"),
        ));
    }
    if let Some(first) = float_ids {
        out.warnings.push(Warning::new(
            "decimal-integers",
            Some(first),
            "ids, types or parents written with a decimal point (such as 3.0) were read as whole numbers",
        ));
    }
    let na = out.points.iter().filter(|p| p.radius.is_none()).count();
    if na > 0 {
        let first = out
            .points
            .iter()
            .find(|p| p.radius.is_none())
            .map(|p| p.line);
        out.warnings.push(Warning::new(
            "radius-unknown",
            first,
            format!("{na} point(s) have radius NA (unknown); cable work needs a default diameter"),
        ));
    }
}

/// Number of `\n` bytes, summed in blocks so that the compiler can use vector instructions.
fn count_newlines(bytes: &[u8]) -> usize {
    bytes
        .chunks(4096)
        .map(|c| c.iter().fold(0u32, |a, &b| a + u32::from(b == b'\n')) as usize)
        .sum()
}

/// A field as quoted in an error message: at most 40 characters (a line may be 100 MB long).
fn shown(text: &str) -> String {
    match text.char_indices().nth(40) {
        Some((cut, _)) => format!("{}…", &text[..cut]),
        None => text.to_string(),
    }
}

fn parse_float(text: &str, column: usize) -> Result<f64, Fault> {
    let v: f64 = text.parse().map_err(|_| Fault::NotANumber {
        column: column + 1,
        name: NAMES[column],
        text: shown(text),
    })?;
    if !v.is_finite() {
        return Err(Fault::NotFinite {
            column: column + 1,
            name: NAMES[column],
            text: shown(text),
        });
    }
    Ok(v)
}

/// Whole numbers; `3.0` is accepted (noted in `float_seen`), `3.5` is not.
fn parse_int(
    text: &str,
    column: usize,
    float_seen: &mut Option<usize>,
    line: usize,
) -> Result<i64, Fault> {
    if let Ok(v) = text.parse::<i64>() {
        return Ok(v);
    }
    let v = parse_float(text, column)?;
    if v.fract() != 0.0 {
        return Err(Fault::NotAnInteger {
            column: column + 1,
            name: NAMES[column],
            text: shown(text),
        });
    }
    if v.abs() >= 9.2e18 {
        return Err(Fault::OutOfRange {
            name: NAMES[column],
            text: shown(text),
            rule: "whole numbers must fit in 64 bits",
        });
    }
    float_seen.get_or_insert(line);
    Ok(v as i64)
}

/// Writes points as SWC text. Floats use the shortest form that reads back to the same value,
/// so read → write → read gives the same tree.
pub fn write_string(points: &[SwcPoint], header: &[String]) -> String {
    let mut s = String::with_capacity(points.len() * 48 + 64);
    for h in header {
        let _ = writeln!(s, "#{h}");
    }
    for p in points {
        let r = match p.radius {
            Some(r) => format!("{r}"),
            None => "NA".to_string(),
        };
        let _ = writeln!(
            s,
            "{} {} {} {} {} {} {}",
            p.id, p.kind, p.pos[0], p.pos[1], p.pos[2], r, p.parent
        );
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line_of(text: &str) -> Option<usize> {
        parse_str(text, "t.swc").unwrap_err().line
    }

    #[test]
    fn accepts_comments_tabs_crlf_and_scientific_notation() {
        let text = "# header\r\n\r\n1\t1 0 0 0 5 -1\r\n  2 3 1e1 0. .5 1.5e-1   1  \r\n";
        let f = parse_str(text, "t.swc").unwrap();
        assert_eq!(f.points.len(), 2);
        assert_eq!(f.points[1].pos, [10.0, 0.0, 0.5]);
        assert_eq!(f.points[1].radius, Some(0.15));
        assert_eq!(f.points[1].line, 4);
        assert_eq!(f.header, vec![" header".to_string()]);
    }

    #[test]
    fn rejections_name_the_line() {
        assert_eq!(line_of("1 1 0 0 0 1 -1\n2 3 0 0\n"), Some(2));
        assert_eq!(line_of("1 1 0 0 0 1 -1\n2 3 x 0 0 1 1\n"), Some(2));
        assert_eq!(line_of("1 1 0 0 0 1 -1\n\n2 3 0 0 0 -1 1\n"), Some(3));
        assert_eq!(line_of("1 1 0 0 0 1 -1\n2 3 0 0 nan 1 1\n"), Some(2));
        assert_eq!(line_of("1 1 0 0 0 1 -1\n2.5 3 0 0 0 1 1\n"), Some(2));
        assert_eq!(line_of("1 1 0 0 0 1 -1\n2 3 0 0 0 1 2\n"), Some(2));
        assert_eq!(line_of("1 1 0 0 0 1 -1\n2 3 0 0 0 1 -7\n"), Some(2));
        assert_eq!(line_of("1 1 0 0 0 1 inf\n"), Some(1));
        assert!(matches!(
            parse_str("# only a comment\n", "t.swc").unwrap_err().fault,
            Fault::Empty
        ));
    }

    #[test]
    fn na_radius_is_kept_as_unknown_with_a_warning() {
        let f = parse_str("1 1 0 0 0 NA -1\n", "t.swc").unwrap();
        assert_eq!(f.points[0].radius, None);
        assert!(f.warnings.iter().any(|w| w.code == "radius-unknown"));
    }

    #[test]
    fn bad_utf8_names_the_line() {
        let bytes = b"1 1 0 0 0 1 -1\n2 3 0 0 0 1 1 \xff\n";
        let e = parse_bytes(bytes, "t.swc").unwrap_err();
        assert_eq!(e.line, Some(2));
        assert!(matches!(e.fault, Fault::NotUtf8(_)));
        assert!(e.to_string().starts_with("t.swc:2: "));
    }

    #[test]
    fn columns_stage_cuts_comments_and_counts_columns() {
        let mut header = Vec::new();
        assert_eq!(columns("  # only a comment\r", &mut header), Ok(None));
        assert_eq!(header, [" only a comment"]);
        let (f, extra) = columns("1 1 0 0 0 1 -1 7 # c", &mut header)
            .unwrap()
            .unwrap();
        assert_eq!((f[0], f[6], extra), ("1", "-1", true));
        assert_eq!(columns("1 2 3", &mut header), Err(Fault::TooFewColumns(3)));
    }

    #[test]
    fn point_stage_checks_one_line() {
        let mut fi = None;
        let ok = point(&["3", "3", "1", "2", "3", "0.5", "2"], 4, &mut fi).unwrap();
        assert_eq!(
            (ok.id, ok.kind, ok.pos, ok.radius, ok.parent, ok.line),
            (3, 3, [1.0, 2.0, 3.0], Some(0.5), 2, 4)
        );
        let na = point(&["3", "3", "1", "2", "3", "NA", "2"], 4, &mut fi).unwrap();
        assert_eq!(na.radius, None);
        let own = point(&["3", "3", "1", "2", "3", "1", "3"], 4, &mut fi);
        assert_eq!(own.err(), Some(Fault::OwnParent(3)));
        let neg = point(&["3", "3", "1", "2", "3", "-1", "2"], 4, &mut fi);
        assert_eq!(neg.err(), Some(Fault::NegativeRadius(-1.0)));
        assert_eq!(fi, None);
        point(&["3.0", "3", "1", "2", "3", "1", "2"], 9, &mut fi).unwrap();
        assert_eq!(fi, Some(9));
    }
}
