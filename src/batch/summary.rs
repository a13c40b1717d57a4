//! The summary table (CSV and JSON lines) and the merge of shard tables.

use super::{BatchError, Row, Shard, Status};
use crate::export::write_atomic;
use std::path::{Path, PathBuf};

/// The CSV header, in the column order of [`csv_line`].
pub const CSV_HEADER: &str = "file,status,points,tips,total_length_um,compartments,soma_rin_full_mohm,soma_rin_reduced_mohm,site_error_median_np,site_error_p95_np,site_error_max_np,synapses,inputs,seconds,error";

/// Quotes a CSV field when it holds a comma, quote or line break (RFC 4180).
fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// One CSV line (no line break) of a row; missing values are empty fields.
pub fn csv_line(r: &Row) -> String {
    fn opt<T: ToString>(v: Option<T>) -> String {
        v.map(|x| x.to_string()).unwrap_or_default()
    }
    [
        csv_field(&r.file),
        match r.status {
            Status::Ok => "ok".to_string(),
            Status::Failed => "failed".to_string(),
        },
        opt(r.points),
        opt(r.tips),
        opt(r.total_length_um),
        opt(r.compartments),
        opt(r.soma_rin_full_mohm),
        opt(r.soma_rin_reduced_mohm),
        opt(r.site_error_median_np),
        opt(r.site_error_p95_np),
        opt(r.site_error_max_np),
        opt(r.synapses),
        opt(r.inputs),
        opt(r.seconds),
        csv_field(r.error.as_deref().unwrap_or("")),
    ]
    .join(",")
}

/// Writes `rows` (sorted by file first) as `<out>/<stem>.csv` and `<out>/<stem>.jsonl`, where the
/// stem is [`Shard::summary_stem`]. Returns the two paths.
pub fn write_summary(
    out: &Path,
    stem: &str,
    rows: &[Row],
) -> Result<(PathBuf, PathBuf), BatchError> {
    let mut sorted: Vec<&Row> = rows.iter().collect();
    sorted.sort_by(|a, b| a.file.cmp(&b.file));
    let mut csv = String::with_capacity(128 * (rows.len() + 1));
    csv.push_str(CSV_HEADER);
    csv.push('\n');
    let mut jsonl = String::with_capacity(256 * rows.len());
    for r in &sorted {
        csv.push_str(&csv_line(r));
        csv.push('\n');
        // a Row holds only strings, numbers and options: serialising it cannot fail
        jsonl.push_str(&serde_json::to_string(r).unwrap_or_default());
        jsonl.push('\n');
    }
    let csv_path = out.join(format!("{stem}.csv"));
    let jsonl_path = out.join(format!("{stem}.jsonl"));
    write_atomic(&csv_path, csv.as_bytes(), &[])?;
    write_atomic(&jsonl_path, jsonl.as_bytes(), &[])?;
    Ok((csv_path, jsonl_path))
}

/// Reads the rows of a `.jsonl` summary.
pub fn read_summary(path: &Path) -> Result<Vec<Row>, BatchError> {
    let err = |message: String| BatchError::SummaryRead {
        path: path.to_path_buf(),
        message,
    };
    let text = std::fs::read_to_string(path).map_err(|e| err(e.to_string()))?;
    text.lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty())
        .map(|(i, l)| serde_json::from_str(l).map_err(|e| err(format!("line {}: {e}", i + 1))))
        .collect()
}

/// Joins the shard tables `summary.shard-I-of-K.jsonl` in `out` (all I from 1 to K of one K
/// must be there) into `summary.csv` and `summary.jsonl`, sorted by file. Returns the rows.
pub fn merge_summaries(out: &Path) -> Result<Vec<Row>, BatchError> {
    let merr = |message: String| BatchError::Merge {
        folder: out.to_path_buf(),
        message,
    };
    let entries = std::fs::read_dir(out).map_err(|source| BatchError::ReadDir {
        path: out.to_path_buf(),
        source,
    })?;
    let mut shards: Vec<(Shard, PathBuf)> = Vec::new();
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().to_string();
        let Some(mid) = name
            .strip_prefix("summary.shard-")
            .and_then(|s| s.strip_suffix(".jsonl"))
        else {
            continue;
        };
        let Some((i, k)) = mid.split_once("-of-") else {
            continue;
        };
        if let Ok(s) = format!("{i}/{k}").parse::<Shard>() {
            shards.push((s, e.path()));
        }
    }
    let counts: std::collections::BTreeSet<u32> = shards.iter().map(|s| s.0.count).collect();
    let k = match counts.len() {
        0 => {
            return Err(merr(
                "no shard summaries (summary.shard-I-of-K.jsonl) here".into(),
            ));
        }
        1 => counts.into_iter().next().unwrap_or(1),
        _ => {
            return Err(merr(format!(
                "shard summaries of different splits are mixed here (K = {}); remove the old ones",
                counts
                    .iter()
                    .map(|c| c.to_string())
                    .collect::<Vec<_>>()
                    .join(", ")
            )));
        }
    };
    let missing: Vec<String> = (1..=k)
        .filter(|i| !shards.iter().any(|s| s.0.index == *i))
        .map(|i| i.to_string())
        .collect();
    if !missing.is_empty() {
        return Err(merr(format!(
            "the summaries of shard(s) {} of {k} are missing; run those shards first",
            missing.join(", ")
        )));
    }
    // copy the shards' lines verbatim (re-reading decimals could change their last bit), in
    // file order; the CSV and JSON lines of a shard list the same files in the same order
    let mut lines: Vec<(Row, String, String)> = Vec::new();
    for (shard, path) in &shards {
        let rows = read_summary(path)?;
        let jsonl = std::fs::read_to_string(path).map_err(|e| BatchError::SummaryRead {
            path: path.clone(),
            message: e.to_string(),
        })?;
        let csv_path = out.join(format!("{}.csv", shard.summary_stem()));
        let csv = std::fs::read_to_string(&csv_path).map_err(|e| BatchError::SummaryRead {
            path: csv_path.clone(),
            message: e.to_string(),
        })?;
        let records = csv_records(&csv);
        let json_lines: Vec<&str> = jsonl.lines().filter(|l| !l.trim().is_empty()).collect();
        if records.first().map(String::as_str) != Some(CSV_HEADER)
            || records.len() != rows.len() + 1
            || json_lines.len() != rows.len()
        {
            return Err(merr(format!(
                "{} and {} do not match; rerun shard {shard}",
                csv_path.display(),
                path.display()
            )));
        }
        for ((r, c), j) in rows.into_iter().zip(&records[1..]).zip(json_lines) {
            lines.push((r, c.clone(), j.to_string()));
        }
    }
    lines.sort_by(|a, b| a.0.file.cmp(&b.0.file));
    if let Some(w) = lines.windows(2).find(|w| w[0].0.file == w[1].0.file) {
        return Err(merr(format!(
            "{} appears in two shard summaries; were the shards run on different inputs?",
            w[0].0.file
        )));
    }
    let mut csv = String::from(CSV_HEADER);
    csv.push('\n');
    let mut jsonl = String::new();
    for (_, c, j) in &lines {
        csv.push_str(c);
        csv.push('\n');
        jsonl.push_str(j);
        jsonl.push('\n');
    }
    write_atomic(&out.join("summary.csv"), csv.as_bytes(), &[])?;
    write_atomic(&out.join("summary.jsonl"), jsonl.as_bytes(), &[])?;
    Ok(lines.into_iter().map(|l| l.0).collect())
}

/// Splits CSV text into records (without their line breaks); a line break inside a quoted
/// field stays in its record (RFC 4180).
fn csv_records(text: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    for ch in text.chars() {
        match ch {
            '"' => {
                quoted = !quoted;
                cur.push(ch);
            }
            '\n' if !quoted => out.push(std::mem::take(&mut cur)),
            _ => cur.push(ch),
        }
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_quotes_what_needs_quoting() {
        // RFC 4180: a field with a comma, quote or line break is quoted, quotes doubled
        assert_eq!(csv_field("plain"), "plain");
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"x\""), "\"say \"\"x\"\"\"");
        let r = Row::failed("a,b.swc", Some(0.5), "line 3: bad\nthing".into());
        let line = csv_line(&r);
        assert!(line.starts_with("\"a,b.swc\",failed,,"), "{line}");
        assert!(line.ends_with(",0.5,\"line 3: bad\nthing\""), "{line}");
        assert_eq!(
            CSV_HEADER.split(',').count(),
            csv_line(&Row::failed("x", None, "e".into()))
                .split(',')
                .count()
        );
    }
}
