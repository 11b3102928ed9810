//! Reader for time-marked label files in the NIST CTM layout: one label per line,
//! `utterance channel start duration label [confidence]`, separated by spaces or tabs; times
//! in seconds from the start of the utterance; lines starting with `;;` are comments.

use std::path::Path;

use super::utterances::{Interval, UttList};
use super::CaptureError;

/// The lines of a CTM file grouped per utterance of `ul`, and the number of lines that name
/// an utterance `ul` does not list (left out).
pub type CtmIntervals = (Vec<Vec<Interval>>, usize);

/// A finite time >= 0 in seconds from field `what`.
fn time(path: &Path, line: usize, what: &str, v: &str) -> Result<f64, CaptureError> {
    match v.parse::<f64>() {
        Ok(t) if t.is_finite() && t >= 0.0 => Ok(t),
        _ => Err(CaptureError::text(
            path,
            line,
            format!("a {what} in seconds (a finite number >= 0)"),
            format!("'{}'", v.chars().take(40).collect::<String>()),
        )),
    }
}

/// Read a CTM file (`path` names it in errors).
pub fn read_ctm(path: &Path, ul: &UttList) -> Result<CtmIntervals, CaptureError> {
    let bytes = std::fs::read(path).map_err(|e| CaptureError::io(path, e))?;
    parse_ctm(path, &bytes, ul)
}

/// Parse the bytes of a CTM file. Zero-length entries hold no frame centre and are left out.
pub fn parse_ctm(path: &Path, bytes: &[u8], ul: &UttList) -> Result<CtmIntervals, CaptureError> {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let text = std::str::from_utf8(bytes).map_err(|e| {
        let line = bytes[..e.valid_up_to()]
            .iter()
            .filter(|&&b| b == b'\n')
            .count()
            + 1;
        CaptureError::text(
            path,
            line,
            "UTF-8 text",
            format!(
                "a byte that is not UTF-8 at byte offset {}",
                e.valid_up_to()
            ),
        )
    })?;
    let mut per_utt: Vec<Vec<Interval>> = vec![Vec::new(); ul.names.len()];
    let mut unlisted = 0usize;
    for (i, l) in text.lines().enumerate() {
        let line = i + 1;
        let t = l.trim();
        if t.is_empty() || t.starts_with(";;") {
            continue;
        }
        let f: Vec<&str> = t.split_whitespace().collect();
        if f.len() < 5 {
            return Err(CaptureError::text(
                path,
                line,
                "5 or 6 fields: utterance channel start duration label [confidence]",
                format!("{} fields", f.len()),
            ));
        }
        let start = time(path, line, "start", f[2])?;
        let dur = time(path, line, "duration", f[3])?;
        let Some(u) = ul.find(f[0]) else {
            unlisted += 1;
            continue;
        };
        if dur > 0.0 {
            per_utt[u].push(Interval {
                start,
                end: start + dur,
                label: f[4].to_string(),
                line,
            });
        }
    }
    Ok((per_utt, unlisted))
}
