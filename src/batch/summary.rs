//! The summary table (CSV and JSON lines) and the merge of shard tables.

use super::{BatchError, Row, Shard, Status};
use crate::export::write_atomic;
use std::path::{Path, PathBuf};

/// The CSV header, in the column order of [`csv_fields`].
pub const CSV_HEADER: &str = "file,status,points,tips,total_length_um,compartments,soma_input_resistance_dc_full_mohm,soma_input_resistance_dc_reduced_mohm,attenuation_to_soma_error_median_np,attenuation_to_soma_error_p95_np,attenuation_to_soma_error_max_np,synapses,inputs,epsp_peak_error_median_np,epsp_peak_error_p95_np,time_to_peak_error_p95,soma_epsp_peak_error_np,seconds,error";

/// The fields of a row in the order of [`CSV_HEADER`]; missing values are empty fields.
pub fn csv_fields(r: &Row) -> [String; 19] {
    fn opt<T: ToString>(v: Option<T>) -> String {
        v.map(|x| x.to_string()).unwrap_or_default()
    }
    [
        r.file.clone(),
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
        opt(r.epsp_peak_error_median_np),
        opt(r.epsp_peak_error_p95_np),
        opt(r.time_to_peak_error_p95),
        opt(r.soma_epsp_peak_error_np),
        opt(r.seconds),
        r.error.clone().unwrap_or_default(),
    ]
}

/// A CSV table (the `csv` crate: fields quoted where RFC 4180 needs it, `\n` between records)
/// with [`CSV_HEADER`] first.
fn csv_table<I, R>(records: I) -> Vec<u8>
where
    I: IntoIterator<Item = R>,
    R: IntoIterator,
    R::Item: AsRef<[u8]>,
{
    let mut w = csv::Writer::from_writer(Vec::new());
    // writing into memory cannot fail; into_inner only flushes that buffer
    let _ = w.write_record(CSV_HEADER.split(','));
    for r in records {
        let _ = w.write_record(r);
    }
    w.into_inner().unwrap_or_default()
}

/// Reads the records of a summary CSV written by [`write_summary`] (header checked).
fn read_csv_records(path: &Path) -> Result<Vec<csv::StringRecord>, BatchError> {
    let err = |message: String| BatchError::SummaryRead {
        path: path.to_path_buf(),
        message,
    };
    let mut rd = csv::Reader::from_path(path).map_err(|e| err(e.to_string()))?;
    let header = rd.headers().map_err(|e| err(e.to_string()))?;
    if !header.iter().eq(CSV_HEADER.split(',')) {
        return Err(err("the first line is not the summary header".into()));
    }
    rd.records()
        .map(|r| r.map_err(|e| err(e.to_string())))
        .collect()
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
    let csv = csv_table(sorted.iter().map(|r| csv_fields(r)));
    let mut jsonl = String::with_capacity(256 * rows.len());
    for r in &sorted {
        // a Row holds only strings, numbers and options: serialising it cannot fail
        jsonl.push_str(&serde_json::to_string(r).unwrap_or_default());
        jsonl.push('\n');
    }
    let csv_path = out.join(format!("{stem}.csv"));
    let jsonl_path = out.join(format!("{stem}.jsonl"));
    write_atomic(&csv_path, &csv, &[])?;
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
    // copy the shards' fields and lines verbatim (re-reading decimals could change their last
    // bit), in file order; the CSV and JSON lines of a shard list the same files in the same order
    let mut lines: Vec<(Row, csv::StringRecord, String)> = Vec::new();
    for (shard, path) in &shards {
        let rows = read_summary(path)?;
        let jsonl = std::fs::read_to_string(path).map_err(|e| BatchError::SummaryRead {
            path: path.clone(),
            message: e.to_string(),
        })?;
        let csv_path = out.join(format!("{}.csv", shard.summary_stem()));
        let records = read_csv_records(&csv_path)?;
        let json_lines: Vec<&str> = jsonl.lines().filter(|l| !l.trim().is_empty()).collect();
        if records.len() != rows.len()
            || json_lines.len() != rows.len()
            || rows
                .iter()
                .zip(&records)
                .any(|(r, c)| c.get(0) != Some(&r.file))
        {
            return Err(merr(format!(
                "{} and {} do not match; rerun shard {shard}",
                csv_path.display(),
                path.display()
            )));
        }
        for ((r, c), j) in rows.into_iter().zip(records).zip(json_lines) {
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
    let csv = csv_table(lines.iter().map(|l| &l.1));
    let mut jsonl = String::new();
    for (_, _, j) in &lines {
        jsonl.push_str(j);
        jsonl.push('\n');
    }
    write_atomic(&out.join("summary.csv"), &csv, &[])?;
    write_atomic(&out.join("summary.jsonl"), jsonl.as_bytes(), &[])?;
    Ok(lines.into_iter().map(|l| l.0).collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_quotes_what_needs_quoting_and_reads_back() {
        // RFC 4180: a field with a comma, quote or line break is quoted, quotes doubled
        let odd = Row::failed("a,b \"c\".swc", Some(0.5), "line 3: bad\nthing".into());
        let plain = Row::failed("x.swc", None, "e".into());
        let table = csv_table([csv_fields(&odd), csv_fields(&plain)]);
        let text = String::from_utf8(table.clone()).unwrap();
        assert!(text.starts_with(CSV_HEADER), "{text}");
        assert!(text.contains("\n\"a,b \"\"c\"\".swc\",failed,,"), "{text}");
        assert!(text.contains(",0.5,\"line 3: bad\nthing\"\n"), "{text}");
        assert!(
            text.ends_with("\nx.swc,failed,,,,,,,,,,,,,,,,,e\n"),
            "{text}"
        );
        // read back with the crate's reader: the same fields
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("s.csv");
        std::fs::write(&p, &table).unwrap();
        let recs = read_csv_records(&p).unwrap();
        assert_eq!(recs.len(), 2);
        assert!(
            recs[0]
                .iter()
                .eq(csv_fields(&odd).iter().map(String::as_str))
        );
        assert!(
            recs[1]
                .iter()
                .eq(csv_fields(&plain).iter().map(String::as_str))
        );
        // a file with another header is refused
        std::fs::write(&p, "file,status\nx,ok\n").unwrap();
        assert!(read_csv_records(&p).is_err());
    }
}
