//! Reader for TextGrid files (the open text format of time-aligned annotation tiers), in
//! both the long text format (`xmin = 0`, `intervals [1]:` ...) and the short one (bare
//! values, one per line). Encodings: UTF-8 with or without a byte-order mark, UTF-16 with a
//! byte-order mark.
//!
//! Both formats are the same sequence of values: a quoted file type and object class, the
//! grid's start and end, a `<exists>` flag and the number of tiers; then per tier its class
//! (`"IntervalTier"` or `"TextTier"`), name, start, end and item count; then per interval its
//! start, end and quoted text (per point its time and text). The long format adds a label
//! before each value, which the reader skips; in the short format anything but a value is an
//! error.

use std::path::Path;

use super::utterances::Interval;
use super::CaptureError;

/// An interval tier.
#[derive(Clone, Debug, PartialEq)]
pub struct IntervalTier {
    /// Tier name.
    pub name: String,
    /// Start and end of the tier.
    pub xmin: f64,
    /// End of the tier.
    pub xmax: f64,
    /// Intervals in file order (zero-length ones left out), each with its line.
    pub intervals: Vec<Interval>,
}

/// A parsed TextGrid: its interval tiers and the names of the point tiers it skipped.
#[derive(Clone, Debug, PartialEq)]
pub struct TextGrid {
    /// Start of the grid.
    pub xmin: f64,
    /// End of the grid.
    pub xmax: f64,
    /// Interval tiers in file order.
    pub tiers: Vec<IntervalTier>,
    /// Names of point tiers (not read).
    pub point_tiers: Vec<String>,
}

#[derive(Clone, Debug, PartialEq)]
enum Tok {
    Num(f64),
    Str(String),
    Flag(String),
    Word(String),
}

fn describe(t: &Tok) -> String {
    let cut = |s: &str| s.chars().take(40).collect::<String>();
    match t {
        Tok::Num(v) => format!("the number {v}"),
        Tok::Str(s) => format!("the text \"{}\"", cut(s)),
        Tok::Flag(s) => format!("<{}>", cut(s)),
        Tok::Word(s) => format!("'{}'", cut(s)),
    }
}

/// The file's text: UTF-16 (either byte order) after its byte-order mark, else UTF-8 with
/// the mark, if any, removed.
pub fn decode(path: &Path, bytes: &[u8]) -> Result<String, CaptureError> {
    let utf16 = match bytes {
        [0xFF, 0xFE, rest @ ..] => Some((rest, false)),
        [0xFE, 0xFF, rest @ ..] => Some((rest, true)),
        _ => None,
    };
    if let Some((rest, big)) = utf16 {
        let units = rest.chunks(2).map(|c| {
            let pair = [c[0], *c.get(1).unwrap_or(&0)];
            if big {
                u16::from_be_bytes(pair)
            } else {
                u16::from_le_bytes(pair)
            }
        });
        let mut out = String::with_capacity(rest.len() / 2);
        let mut line = 1;
        for c in char::decode_utf16(units) {
            match c {
                Ok(c) => {
                    line += (c == '\n') as usize;
                    out.push(c);
                }
                Err(_) => {
                    return Err(CaptureError::text(
                        path,
                        line,
                        "UTF-16 text",
                        "an unpaired surrogate",
                    ));
                }
            }
        }
        if rest.len() % 2 == 1 {
            return Err(CaptureError::text(
                path,
                line,
                "UTF-16 text (an even number of bytes)",
                "an odd byte at the end",
            ));
        }
        return Ok(out);
    }
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    match std::str::from_utf8(bytes) {
        Ok(s) => Ok(s.to_string()),
        Err(e) => {
            let line = bytes[..e.valid_up_to()]
                .iter()
                .filter(|&&b| b == b'\n')
                .count()
                + 1;
            Err(CaptureError::text(
                path,
                line,
                "UTF-8 or UTF-16 text (UTF-16 needs a byte-order mark)",
                format!(
                    "a byte that is not UTF-8 at byte offset {}",
                    e.valid_up_to()
                ),
            ))
        }
    }
}

/// Split the text into values (numbers, quoted texts with `""` for a quote, `<flags>`) and
/// other words, each with its line.
fn tokenize(path: &Path, text: &str) -> Result<Vec<(Tok, usize)>, CaptureError> {
    let mut out = Vec::new();
    let mut line = 1usize;
    let mut it = text.chars().peekable();
    while let Some(&c) = it.peek() {
        if c.is_whitespace() {
            line += (c == '\n') as usize;
            it.next();
            continue;
        }
        let start = line;
        if c == '"' {
            it.next();
            let mut s = String::new();
            loop {
                match it.next() {
                    None => {
                        return Err(CaptureError::text(
                            path,
                            start,
                            "a closing '\"' for the text begun here",
                            "the end of the file",
                        ))
                    }
                    Some('"') if it.peek() == Some(&'"') => {
                        it.next();
                        s.push('"');
                    }
                    Some('"') => break,
                    Some(ch) => {
                        line += (ch == '\n') as usize;
                        s.push(ch);
                    }
                }
            }
            out.push((Tok::Str(s), start));
            continue;
        }
        let mut w = String::new();
        while let Some(&ch) = it.peek() {
            if ch.is_whitespace() || (ch == '"' && !w.is_empty()) {
                break;
            }
            w.push(ch);
            it.next();
        }
        let tok = if w.len() > 2 && w.starts_with('<') && w.ends_with('>') {
            Tok::Flag(w[1..w.len() - 1].to_string())
        } else if let Some(v) = number(&w) {
            Tok::Num(v)
        } else {
            Tok::Word(w)
        };
        out.push((tok, start));
    }
    Ok(out)
}

/// A decimal number as the format writes them (digits, sign, point, exponent).
fn number(w: &str) -> Option<f64> {
    let ok = !w.is_empty()
        && w.bytes().any(|b| b.is_ascii_digit())
        && w.bytes()
            .all(|b| b.is_ascii_digit() || b"+-.eE".contains(&b));
    if ok {
        w.parse().ok()
    } else {
        None
    }
}

/// The value stream with a cursor; in the long format labels are dropped beforehand.
struct Values<'a> {
    path: &'a Path,
    toks: Vec<(Tok, usize)>,
    pos: usize,
}

impl Values<'_> {
    fn line(&self) -> usize {
        self.toks
            .get(self.pos)
            .or(self.toks.last())
            .map(|t| t.1)
            .unwrap_or(1)
    }
    fn next(&mut self, expected: &str) -> Result<(Tok, usize), CaptureError> {
        match self.toks.get(self.pos) {
            Some(t) => {
                self.pos += 1;
                Ok(t.clone())
            }
            None => Err(CaptureError::text(
                self.path,
                self.line(),
                expected,
                "the end of the file",
            )),
        }
    }
    fn num(&mut self, expected: &str) -> Result<(f64, usize), CaptureError> {
        match self.next(expected)? {
            (Tok::Num(v), l) if v.is_finite() => Ok((v, l)),
            (t, l) => Err(CaptureError::text(self.path, l, expected, describe(&t))),
        }
    }
    fn text(&mut self, expected: &str) -> Result<(String, usize), CaptureError> {
        match self.next(expected)? {
            (Tok::Str(s), l) => Ok((s, l)),
            (t, l) => Err(CaptureError::text(self.path, l, expected, describe(&t))),
        }
    }
    fn count(&mut self, expected: &str) -> Result<usize, CaptureError> {
        let (v, l) = self.num(expected)?;
        if v < 0.0 || v.fract() != 0.0 || v > 1e9 {
            return Err(CaptureError::text(self.path, l, expected, format!("{v}")));
        }
        Ok(v as usize)
    }
}

/// Read and parse a TextGrid file.
pub fn read_textgrid(path: &Path) -> Result<TextGrid, CaptureError> {
    let bytes = std::fs::read(path).map_err(|e| CaptureError::io(path, e))?;
    parse_textgrid(path, &bytes)
}

/// Parse the bytes of a TextGrid file (`path` names it in errors).
pub fn parse_textgrid(path: &Path, bytes: &[u8]) -> Result<TextGrid, CaptureError> {
    let text = decode(path, bytes)?;
    let mut toks = tokenize(path, &text)?;
    // The header: words (`File type =`, long and short format alike) and two texts.
    let strs: Vec<usize> = (0..toks.len())
        .filter(|&i| !matches!(toks[i].0, Tok::Word(_)))
        .take(2)
        .collect();
    let head_ok = matches!(strs.as_slice(), [a, b]
        if matches!(&toks[*a].0, Tok::Str(s) if s.starts_with("ooTextFile"))
            && matches!(&toks[*b].0, Tok::Str(s) if s == "TextGrid"));
    if !head_ok {
        let first = strs.first().and_then(|&i| toks.get(i)).or(toks.first());
        let found = first
            .map(|t| describe(&t.0))
            .unwrap_or("an empty file".into());
        let l = first.map(|t| t.1).unwrap_or(1);
        return Err(CaptureError::text(
            path,
            l,
            "a TextGrid text file: File type = \"ooTextFile\", Object class = \"TextGrid\"",
            found,
        ));
    }
    let body = strs[1] + 1;
    // Labels (long format) are words; the short format has none after the header.
    let long = matches!(toks.get(body), Some((Tok::Word(_), _)));
    let mut toks = toks.split_off(body);
    if long {
        toks.retain(|t| !matches!(t.0, Tok::Word(_)));
    }
    let mut v = Values { path, toks, pos: 0 };
    let (xmin, _) = v.num("the start time of the grid (xmin)")?;
    let (xmax, _) = v.num("the end time of the grid (xmax)")?;
    let n_tiers = match v.toks.get(v.pos) {
        Some((Tok::Flag(f), l)) => {
            let (f, l) = (f.clone(), *l);
            v.pos += 1;
            match f.as_str() {
                "exists" => v.count("the number of tiers")?,
                "absent" => 0,
                _ => {
                    return Err(CaptureError::text(
                        path,
                        l,
                        "<exists> or <absent>",
                        format!("<{f}>"),
                    ))
                }
            }
        }
        _ => v.count("<exists> and the number of tiers")?,
    };
    let mut grid = TextGrid {
        xmin,
        xmax,
        tiers: vec![],
        point_tiers: vec![],
    };
    for _ in 0..n_tiers {
        read_tier(&mut v, &mut grid)?;
    }
    Ok(grid)
}

/// Read one tier: interval tiers are kept, point tiers read past and named.
fn read_tier(v: &mut Values, grid: &mut TextGrid) -> Result<(), CaptureError> {
    let (class, cl) = v.text("a tier class (\"IntervalTier\" or \"TextTier\")")?;
    let (name, _) = v.text("the tier name")?;
    let (xmin, _) = v.num("the start time of the tier")?;
    let (xmax, _) = v.num("the end time of the tier")?;
    let n = v.count("the number of items in the tier")?;
    match class.as_str() {
        "IntervalTier" => {
            let mut intervals: Vec<Interval> = Vec::new();
            let mut last_end = f64::NEG_INFINITY;
            let mut last_line = 0;
            for _ in 0..n {
                let (s, line) = v.num("the start time of an interval (xmin)")?;
                let (e, el) = v.num("the end time of an interval (xmax)")?;
                let (label, _) = v.text("the text of an interval")?;
                if e < s {
                    return Err(CaptureError::text(
                        v.path,
                        el,
                        format!("an interval end at or after its start {s}"),
                        format!("{e} (the interval ends before it starts)"),
                    ));
                }
                if s < last_end - 1e-9 {
                    return Err(CaptureError::text(v.path, line, format!("a start at or after the end {last_end} of the interval on line {last_line} (intervals must not overlap)"), format!("{s}")));
                }
                (last_end, last_line) = (e, line);
                if e > s {
                    intervals.push(Interval {
                        start: s,
                        end: e,
                        label,
                        line,
                    });
                }
            }
            grid.tiers.push(IntervalTier {
                name,
                xmin,
                xmax,
                intervals,
            });
        }
        "TextTier" | "PointTier" => {
            for _ in 0..n {
                v.num("the time of a point")?;
                v.text("the text of a point")?;
            }
            grid.point_tiers.push(name);
        }
        _ => {
            return Err(CaptureError::text(
                v.path,
                cl,
                "a tier class \"IntervalTier\" or \"TextTier\"",
                format!("\"{class}\""),
            ));
        }
    }
    Ok(())
}
