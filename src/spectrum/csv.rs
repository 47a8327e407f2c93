//! The spectrum CSV files of DESIGN.md §3: a header line, comma separated, `#` comment lines
//! allowed; either `wavelength_nm,reflectance` (fraction 0..1) or
//! `wavelength_nm,sample,dark,reference` (counts). Wavelengths run one way, rising or falling
//! (a falling file is read in reverse). Every problem names its line.

use super::saturation::clipped_pixels;
use super::{Counts, RawSpectrum, Spectrum, SpectrumError};
use crate::optics::table::{csv_content, csv_record, trim};
use std::io::{self, Read, Write};
use std::path::Path;

/// The two forms a spectrum file can take.
#[derive(Debug, Clone, PartialEq)]
pub enum SpectrumFile {
    /// `wavelength_nm,reflectance`.
    Reflectance(Spectrum),
    /// `wavelength_nm,sample,dark,reference`.
    Counts(RawSpectrum),
}

/// Reflectance values accepted in a file; outside this the column is not a 0..1 fraction.
const REFLECTANCE_LIMITS: [f64; 2] = [-0.1, 1.5];
/// Fewest data rows a spectrum file may have.
const MIN_ROWS: usize = 3;
/// Most data rows (pixels) a spectrum may have. Fibre spectrometers have 512 to 16 384
/// pixels (common practice); a hundred thousand is far past any, and refusing early keeps a
/// wrong or hostile file from costing seconds and gigabytes.
pub const MAX_PIXELS: usize = 100_000;
/// Largest spectrum file read, bytes: [`MAX_PIXELS`] rows of four numbers at full precision
/// take about 10 MB; the rest is room for comments.
pub const MAX_FILE_BYTES: u64 = 32 << 20;

/// Reads and parses a spectrum file: no more than [`MAX_FILE_BYTES`] is ever read (one read
/// for a regular file, which a refit of a thousand sites does a thousand times).
pub fn read_csv(path: &Path) -> Result<SpectrumFile, SpectrumError> {
    let io_err = |source| SpectrumError::Io {
        path: path.to_path_buf(),
        source,
    };
    let file = std::fs::File::open(path).map_err(io_err)?;
    let too_large = |bytes: String| SpectrumError::TooLarge {
        path: path.to_path_buf(),
        message: format!(
            "{bytes} bytes; a spectrum file may have at most {MAX_FILE_BYTES} bytes \
             ({MAX_PIXELS} rows of a few numbers and comments): is this a spectrum file?"
        ),
    };
    let size = file.metadata().map_err(io_err)?.len();
    if size > MAX_FILE_BYTES {
        return Err(too_large(size.to_string()));
    }
    // The bound holds for files whose size the metadata does not tell (pipes, devices).
    let mut bytes = Vec::with_capacity(size as usize + 1);
    file.take(MAX_FILE_BYTES + 1)
        .read_to_end(&mut bytes)
        .map_err(io_err)?;
    if bytes.len() as u64 > MAX_FILE_BYTES {
        return Err(too_large(format!("more than {MAX_FILE_BYTES}")));
    }
    // Valid UTF-8 (every file we write) is checked once and parsed in place.
    match std::str::from_utf8(&bytes) {
        Ok(text) => parse_csv(text, path),
        Err(_) => parse_csv(&String::from_utf8_lossy(&bytes), path),
    }
}

/// Parses spectrum CSV text; `path` is used in messages.
///
/// Data rows of plain decimals (`[+-]digits[.digits]` cells, no spaces, a `\n` after the last)
/// are read in one pass over their bytes ([`plain_row`]); any other line, and any row that
/// pass does not take, goes through the general line reader, which names what is wrong.
pub fn parse_csv(text: &str, path: &Path) -> Result<SpectrumFile, SpectrumError> {
    parse_with(text, path, true)
}

/// [`parse_csv`], with or without the one-pass reading of plain rows (the tests check that
/// both give the same spectrum or the same error).
fn parse_with(text: &str, path: &Path, plain_rows: bool) -> Result<SpectrumFile, SpectrumError> {
    let mut parser = Parser::new(path);
    let mut rest = text;
    let mut number = 0;
    while !rest.is_empty() {
        number += 1;
        if let Some(ncol) = parser.columns.filter(|_| plain_rows) {
            if let Some((row, used)) = plain_row(rest.as_bytes(), ncol) {
                parser.push(number, row)?;
                rest = &rest[used..];
                continue;
            }
        }
        let mut split = lines(rest);
        let raw = split.next().unwrap_or_default();
        // What the line reader left: the text after this line's `\n` (a suffix of `rest`).
        let after = rest.len() - split.remaining();
        rest = &rest[after..];
        parser.line(number, raw)?;
    }
    parser.finish()
}

/// A data row of `ncol` plain decimal cells at the start of `bytes`, ending in `\n` or the
/// end of the text: the row's values (as [`decimal`] reads each cell) and the bytes it takes,
/// newline included. `None` for anything else (the line reader then takes the line).
fn plain_row(bytes: &[u8], ncol: usize) -> Option<([f64; 4], usize)> {
    let mut row = [0.0; 4];
    let mut at = 0;
    for (j, value) in row.iter_mut().enumerate().take(ncol) {
        let (v, used) = decimal_prefix(&bytes[at..])?;
        *value = v;
        at += used;
        match bytes.get(at) {
            Some(b',') if j + 1 < ncol => at += 1,
            Some(b'\n') if j + 1 == ncol => return Some((row, at + 1)),
            None if j + 1 == ncol => return Some((row, at)),
            _ => return None,
        }
    }
    None
}

/// The lines of `text` as `str::lines` gives them (split after each `\n`, a `\r` before it
/// dropped), found by a plain byte scan: cheaper than the library's searcher on lines of a
/// few dozen bytes, and a refit reads a thousand files of a thousand lines.
fn lines(text: &str) -> Lines<'_> {
    Lines { rest: text }
}

/// The iterator of [`lines`].
struct Lines<'a> {
    rest: &'a str,
}

impl<'a> Lines<'a> {
    /// Bytes not yet split into lines.
    fn remaining(&self) -> usize {
        self.rest.len()
    }
}

impl<'a> Iterator for Lines<'a> {
    type Item = &'a str;
    fn next(&mut self) -> Option<&'a str> {
        if self.rest.is_empty() {
            return None;
        }
        let line = match self.rest.bytes().position(|b| b == b'\n') {
            Some(end) => {
                let line = &self.rest[..end];
                self.rest = &self.rest[end + 1..];
                line.strip_suffix('\r').unwrap_or(line)
            }
            None => std::mem::take(&mut self.rest),
        };
        Some(line)
    }
}

/// The state of a spectrum file read one line at a time: the columns parsed so far.
struct Parser<'a> {
    path: &'a Path,
    /// 2 or 4, once the header is read.
    columns: Option<usize>,
    /// Wavelength and value columns (the first `columns` are used).
    values: [Vec<f64>; 4],
    /// The file line of every data row.
    lines: Vec<usize>,
    /// Set by the second data row: files from some instruments run from red to blue.
    descending: Option<bool>,
}

impl<'a> Parser<'a> {
    fn new(path: &'a Path) -> Parser<'a> {
        Parser {
            path,
            columns: None,
            values: Default::default(),
            lines: Vec::new(),
            descending: None,
        }
    }

    fn at(&self, line: usize, message: String) -> SpectrumError {
        SpectrumError::Line {
            file: self.path.to_path_buf(),
            line,
            message,
        }
    }

    /// Takes line number `line` (1-based) of the file.
    fn line(&mut self, line: usize, raw: &str) -> Result<(), SpectrumError> {
        let Some(ncol) = self.columns else {
            return self.header(line, raw);
        };
        let Some(t) = csv_content(raw) else {
            return Ok(());
        };
        // Cells are counted before any is parsed, so a row of the wrong width says so first.
        let mut cells = [""; 4];
        let mut fields = 0;
        let mut start = 0;
        for (at, _) in t.bytes().enumerate().filter(|(_, b)| *b == b',') {
            if fields < ncol {
                cells[fields] = &t[start..at];
            }
            fields += 1;
            start = at + 1;
        }
        if fields < ncol {
            cells[fields] = &t[start..];
        }
        fields += 1;
        if fields != ncol {
            return Err(self.at(line, format!("{fields} fields, the header has {ncol}")));
        }
        let mut row = [0.0; 4];
        for (j, c) in cells[..ncol].iter().map(|c| trim(c)).enumerate() {
            let v = match decimal(c) {
                Some(v) => v,
                None => c.parse().map_err(|_| {
                    self.at(
                        line,
                        format!("\"{}\" in column {} is not a number", short(c), j + 1),
                    )
                })?,
            };
            if !v.is_finite() {
                return Err(self.at(
                    line,
                    format!("{} in column {} is not a finite number", short(c), j + 1),
                ));
            }
            row[j] = v;
        }
        self.push(line, row)
    }

    /// Takes the values of data row `line` (the first `columns` of `row`, each finite).
    fn push(&mut self, line: usize, row: [f64; 4]) -> Result<(), SpectrumError> {
        let ncol = self.columns.unwrap_or(4);
        if self.lines.len() == MAX_PIXELS {
            return Err(self.at(
                line,
                format!("more than {MAX_PIXELS} data rows: a spectrum has one row per detector pixel and no spectrometer has this many; is this a spectrum file?"),
            ));
        }
        let w = row[0];
        if w <= 0.0 {
            return Err(self.at(line, format!("wavelength {w} nm must be positive")));
        }
        if let (Some(&prev), Some(&prev_line)) = (self.values[0].last(), self.lines.last()) {
            if w == prev {
                return Err(self.at(
                    line,
                    format!(
                        "duplicate wavelength {w} nm (also on line {prev_line}): each pixel once"
                    ),
                ));
            }
            let falling = w < prev;
            match self.descending {
                None => self.descending = Some(falling),
                Some(d) if d != falling => {
                    let (way, turn) = if d {
                        ("fall", "above")
                    } else {
                        ("rise", "below")
                    };
                    return Err(self.at(
                        line,
                        format!("wavelength {w} nm is {turn} the previous row's {prev} nm: wavelengths must {way} all the way, as they do from line {}", self.lines[0]),
                    ));
                }
                Some(_) => {}
            }
        }
        for (column, v) in self.values.iter_mut().zip(&row[..ncol]) {
            column.push(*v);
        }
        self.lines.push(line);
        Ok(())
    }

    /// Takes the header line (blank and comment lines before it are skipped).
    fn header(&mut self, line: usize, raw: &str) -> Result<(), SpectrumError> {
        let Some((t, cells)) = csv_record(raw) else {
            return Ok(());
        };
        let names: Vec<String> = cells.iter().map(|c| c.to_lowercase()).collect();
        self.columns = Some(match names.iter().map(String::as_str).collect::<Vec<_>>()[..] {
            ["wavelength_nm", "reflectance"] => 2,
            ["wavelength_nm", "sample", "dark", "reference"] => 4,
            _ => {
                return Err(self.at(
                    line,
                    format!("header \"{}\" is not a spectrum header: use wavelength_nm,reflectance or wavelength_nm,sample,dark,reference", short(t)),
                ))
            }
        });
        Ok(())
    }

    /// Checks the whole spectrum once every line is in.
    fn finish(mut self) -> Result<SpectrumFile, SpectrumError> {
        let Some(ncol) = self.columns else {
            return Err(self.at(1, "no header: the file is empty or only comments".into()));
        };
        let rows = self.lines.len();
        if rows < MIN_ROWS {
            return Err(self.at(
                self.lines.last().copied().unwrap_or(1),
                format!("{rows} data rows; a spectrum needs at least {MIN_ROWS}"),
            ));
        }
        if self.descending == Some(true) {
            self.values.iter_mut().for_each(|c| c.reverse());
            self.lines.reverse();
        }
        if self.values[0].last().is_some_and(|w| *w < 10.0) {
            return Err(self.at(
                self.lines[0],
                "every wavelength is below 10: the column is wavelength_nm (nm), these look like µm"
                    .into(),
            ));
        }
        let [wavelength_nm, second, dark, reference] = std::mem::take(&mut self.values);
        if ncol == 2 {
            check_fraction(&second, &self.lines, &|l, m| self.at(l, m))?;
            return Ok(SpectrumFile::Reflectance(Spectrum {
                wavelength_nm,
                reflectance: second,
            }));
        }
        let sample = second;
        for (name, v) in [("sample", &sample), ("reference", &reference)] {
            let clipped = clipped_pixels(v);
            let n = clipped.iter().filter(|c| **c).count();
            if 2 * n > v.len() {
                let first = clipped.iter().position(|c| *c).unwrap_or(0);
                return Err(self.at(
                    self.lines[first],
                    format!("{name} counts are saturated ({n} of {} rows at {}): shorten the integration time", v.len(), v[first]),
                ));
            }
        }
        for (name, v) in [("sample", &sample), ("reference", &reference)] {
            if v.iter().zip(&dark).all(|(s, d)| s <= d) {
                return Err(self.at(
                    self.lines[0],
                    format!("{name} counts never exceed the dark counts: no light reached the detector (lamp, shutter, fibre?)"),
                ));
            }
        }
        let counts = |c: Vec<f64>| Counts {
            wavelength_nm: wavelength_nm.clone(),
            counts: c,
        };
        Ok(SpectrumFile::Counts(RawSpectrum {
            sample: counts(sample),
            dark: counts(dark),
            reference: counts(reference),
        }))
    }
}

fn check_fraction(
    r: &[f64],
    lines: &[usize],
    at: &impl Fn(usize, String) -> SpectrumError,
) -> Result<(), SpectrumError> {
    let [lo, hi] = REFLECTANCE_LIMITS;
    let max = r.iter().copied().fold(f64::MIN, f64::max);
    if let Some(i) = r.iter().position(|v| *v < lo || *v > hi) {
        let hint = if max > 2.0 && max <= 100.0 {
            "; the column looks like percent: divide by 100"
        } else {
            ""
        };
        return Err(at(
            lines[i],
            format!(
                "reflectance {} is outside {lo}..{hi}: the column is a fraction 0..1{hint}",
                r[i]
            ),
        ));
    }
    Ok(())
}

/// A plain decimal (`[+-]digits[.digits]`, at least one digit), as the library's parser
/// reads it, bit for bit. When its digits, read as one integer, stay within 2⁵³ (as most of
/// a spectrometer's numbers do), by Clinger's fast path: that integer, exact as a double, and
/// one division by an exact power of ten, which IEEE arithmetic rounds correctly (W. D.
/// Clinger, "How to read floating point numbers accurately", PLDI 1990); longer ones by the
/// library's parser. `None` for anything else, which the library's parser then reads (or
/// refuses).
fn decimal(cell: &str) -> Option<f64> {
    match decimal_prefix(cell.as_bytes())? {
        (v, used) if used == cell.len() => Some(v),
        _ => None,
    }
}

/// The plain decimal at the start of `b` as [`decimal`] reads it, and how many bytes it
/// takes (it ends before the first byte that cannot continue it).
fn decimal_prefix(b: &[u8]) -> Option<(f64, usize)> {
    const POW10: [f64; 20] = [
        1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
        1e17, 1e18, 1e19,
    ];
    let (negative, sign) = match b.first()? {
        b'-' => (true, 1),
        b'+' => (false, 1),
        _ => (false, 0),
    };
    let (whole, whole_value) = digit_run(&b[sign..]);
    let mut used = sign + whole;
    let (mut fraction, mut mantissa) = (0, whole_value);
    if b.get(used) == Some(&b'.') {
        let (n, value) = digit_run(&b[used + 1..]);
        used += 1 + n;
        fraction = n;
        if whole + n <= 19 {
            mantissa = mantissa * POW10_U64[n] + value;
        }
    }
    let count = whole + fraction;
    if count == 0 {
        return None;
    }
    if count > 19 || mantissa > 1 << 53 {
        // An ASCII span the library reads whole.
        let v = std::str::from_utf8(&b[..used]).ok()?.parse().ok()?;
        return Some((v, used));
    }
    let v = mantissa as f64 / POW10[fraction];
    Some((if negative { -v } else { v }, used))
}

/// 10⁰ to 10¹⁹, the powers of ten a u64 holds.
const POW10_U64: [u64; 20] = {
    let mut p = [1u64; 20];
    let mut k = 1;
    while k < 20 {
        p[k] = p[k - 1] * 10;
        k += 1;
    }
    p
};

/// The run of ASCII digits at the start of `b`: how many, and their value when there are at
/// most 19 (beyond that the value is meaningless). Eight bytes at a time while eight remain
/// (a word's digits found and converted with a few integer operations), then byte by byte.
#[inline]
fn digit_run(b: &[u8]) -> (usize, u64) {
    const ZEROS: u64 = 0x3030_3030_3030_3030;
    let (mut n, mut value) = (0usize, 0u64);
    while let Some(chunk) = b[n..].first_chunk::<8>() {
        let word = u64::from_le_bytes(*chunk);
        let k = leading_digits(word);
        if k > 0 {
            // The k digits, less '0', moved to the top of the word: the zero bytes below
            // them are leading zeros (the first character is the lowest byte).
            let digits = word.wrapping_sub(ZEROS) << (8 * (8 - k));
            value = value
                .wrapping_mul(POW10_U64[k])
                .wrapping_add(eight_digits(digits));
        }
        n += k;
        if k < 8 {
            return (n, value);
        }
    }
    for &c in &b[n..] {
        if !c.is_ascii_digit() {
            break;
        }
        value = value.wrapping_mul(10).wrapping_add(u64::from(c - b'0'));
        n += 1;
    }
    (n, value)
}

/// How many of a little-endian word's bytes, from the lowest, are ASCII digits (0 to 8).
#[inline]
fn leading_digits(word: u64) -> usize {
    const HIGH_NIBBLES: u64 = 0xF0F0_F0F0_F0F0_F0F0;
    const ZEROS: u64 = 0x3030_3030_3030_3030;
    // A byte is a digit when its high nibble is 3, and still is after adding 6 (0x3A-0x3F
    // are not). A carry out of a byte (≥ 0xFA) reaches only later bytes: past a non-digit.
    let not_digit = ((word & HIGH_NIBBLES) ^ ZEROS)
        | ((word.wrapping_add(0x0606_0606_0606_0606) & HIGH_NIBBLES) ^ ZEROS);
    // The top bit of every non-zero byte of `not_digit`.
    let low7 = 0x7F7F_7F7F_7F7F_7F7F;
    let flags = (((not_digit & low7) + low7) | not_digit) & !low7;
    (flags.trailing_zeros() / 8) as usize
}

/// The number written by eight digit values (0-9) in a little-endian word, the first
/// (most significant) in the lowest byte: pairs, then fours, then the eight combined by
/// multiplications (the method of Lemire's fast_float).
#[inline]
fn eight_digits(v: u64) -> u64 {
    const MASK: u64 = 0x0000_00FF_0000_00FF;
    const MUL1: u64 = 0x000F_4240_0000_0064; // 10⁶ and 100
    const MUL2: u64 = 0x0000_2710_0000_0001; // 10⁴ and 1
    let v = v.wrapping_mul(10).wrapping_add(v >> 8);
    let v1 = (v & MASK).wrapping_mul(MUL1);
    let v2 = ((v >> 16) & MASK).wrapping_mul(MUL2);
    u64::from((v1.wrapping_add(v2) >> 32) as u32)
}

/// The first 40 characters of a cell, for messages.
fn short(s: &str) -> String {
    crate::error_text::excerpt(s, 40)
}

fn write_comments<W: Write>(out: &mut W, comments: &[String]) -> io::Result<()> {
    for c in comments {
        for l in c.lines() {
            writeln!(out, "# {l}")?;
        }
    }
    Ok(())
}

/// Writes `wavelength_nm,reflectance` with optional `#` comment lines first.
pub fn write_reflectance_csv<W: Write>(
    mut out: W,
    spectrum: &Spectrum,
    comments: &[String],
) -> io::Result<()> {
    write_comments(&mut out, comments)?;
    writeln!(out, "wavelength_nm,reflectance")?;
    for (w, r) in spectrum.wavelength_nm.iter().zip(&spectrum.reflectance) {
        writeln!(out, "{w},{r}")?;
    }
    out.flush()
}

/// Writes `wavelength_nm,sample,dark,reference` (the raw spectra a run folder keeps).
/// The wavelength axis is the sample's; the three must share it.
pub fn write_counts_csv<W: Write>(
    mut out: W,
    raw: &RawSpectrum,
    comments: &[String],
) -> io::Result<()> {
    let n = raw.sample.counts.len();
    if raw.dark.counts.len() != n
        || raw.reference.counts.len() != n
        || raw.sample.wavelength_nm.len() != n
    {
        return Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            format!(
                "sample, dark and reference have {}, {} and {} pixels: they must share one wavelength axis",
                n,
                raw.dark.counts.len(),
                raw.reference.counts.len()
            ),
        ));
    }
    write_comments(&mut out, comments)?;
    writeln!(out, "wavelength_nm,sample,dark,reference")?;
    for i in 0..n {
        writeln!(
            out,
            "{},{},{},{}",
            raw.sample.wavelength_nm[i],
            raw.sample.counts[i],
            raw.dark.counts[i],
            raw.reference.counts[i]
        )?;
    }
    out.flush()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// Clinger's fast path gives the library parser's (correctly rounded) double, bit
        /// for bit, and leaves to it whatever it does not take.
        #[test]
        fn decimal_agrees_with_the_library(
            int in 0u64..100_000_000_000,
            frac in 0u64..10_000_000_000,
            frac_digits in 0usize..11,
            sign in prop::sample::select(vec!["", "-", "+"]),
            v in any::<f64>(),
        ) {
            let f = frac % 10u64.pow(frac_digits as u32);
            let cells = [
                if frac_digits == 0 {
                    format!("{sign}{int}")
                } else {
                    format!("{sign}{int}.{f:0frac_digits$}")
                },
                format!("{v}"),
                format!("{v:e}"),
                format!("{}", v.abs() * 1e-3),
            ];
            for c in &cells {
                if let Some(fast) = decimal(c) {
                    let lib: f64 = c.parse().unwrap();
                    prop_assert_eq!(fast.to_bits(), lib.to_bits(), "{}", c);
                }
            }
        }
    }

    proptest! {
        /// Rows read in one pass give what the line reader gives: the same spectrum, or the
        /// same error on the same line, whatever the cells and line ends.
        #[test]
        fn plain_rows_read_as_the_line_reader_reads_them(
            counts in any::<bool>(),
            rows in prop::collection::vec(
                (
                    prop::collection::vec(
                        prop::sample::select(vec![
                            "400", "401.5", "-3", "+7", "0.25", "1e2", " 12", "12 ", "",
                            ".5", "5.", "x", "1.2.3", "382.42424242424244",
                            "0.000000000000000000001", "123456789012345678901",
                            "9007199254740993", "-0", "\u{e9}",
                        ]),
                        1..6,
                    ),
                    prop::sample::select(vec!["\n", "\r\n", "\n\n", "\n# c\n", "\n  \n"]),
                ),
                0..12,
            ),
            ramp in any::<bool>(),
        ) {
            let header = if counts {
                "wavelength_nm,sample,dark,reference\n"
            } else {
                "wavelength_nm,reflectance\n"
            };
            let mut text = header.to_string();
            for (k, (cells, end)) in rows.iter().enumerate() {
                let mut cells: Vec<String> = cells.iter().map(|c| c.to_string()).collect();
                if ramp {
                    // Rising wavelengths with small values after them: rows that parse.
                    cells[0] = format!("{}.{k}", 400 + k);
                }
                text.push_str(&cells.join(","));
                text.push_str(end);
            }
            let path = Path::new("s.csv");
            let (fast, general) = (parse_with(&text, path, true), parse_with(&text, path, false));
            prop_assert_eq!(format!("{fast:?}"), format!("{general:?}"), "{:?}", text);
        }
    }

    #[test]
    fn decimal_takes_plain_numbers_only() {
        for c in [
            "", "-", "+", ".", "1e3", "1.2.3", " 1", "inf", "NaN", "0x10", "1_000",
        ] {
            assert_eq!(decimal(c), None, "{c:?}");
        }
        assert_eq!(decimal("380.6060606060606"), Some(380.6060606060606));
        assert_eq!(decimal(".5"), Some(0.5));
        assert_eq!(decimal("-0"), Some(-0.0));
        // Beyond 2^53 as one integer, or more than 19 digits: read by the library's parser.
        for c in [
            "9007199254740993",
            "382.42424242424244",
            "0.00000000000000000001",
            "-123456789012345678901234.5",
        ] {
            assert_eq!(decimal(c), Some(c.parse::<f64>().unwrap()), "{c}");
        }
    }

    #[test]
    fn lines_split_as_the_library_does() {
        for text in [
            "", "a", "a\n", "a\r\nb", "a\n\nb\r", "\r\n", "a\rb\n", "x\n\r\n",
        ] {
            assert_eq!(
                lines(text).collect::<Vec<_>>(),
                text.lines().collect::<Vec<_>>(),
                "{text:?}"
            );
        }
    }

    fn err(text: &str) -> String {
        parse_csv(text, Path::new("s.csv")).unwrap_err().to_string()
    }

    #[test]
    fn reads_both_forms() {
        let r = parse_csv(
            "# c\nwavelength_nm,reflectance\n400,0.3\n401,0.31\n402,0.32\n",
            Path::new("s.csv"),
        )
        .unwrap();
        assert!(
            matches!(r, SpectrumFile::Reflectance(ref s) if s.len() == 3 && s.reflectance[1] == 0.31)
        );
        let c = parse_csv(
            "Wavelength_nm, Sample, Dark, Reference\n400,100,10,200\n401,110,10,210\n402,120,10,220\n",
            Path::new("s.csv"),
        )
        .unwrap();
        assert!(matches!(c, SpectrumFile::Counts(ref r) if r.reference.counts[2] == 220.0));
    }

    #[test]
    fn errors_name_the_line() {
        let h = "wavelength_nm,reflectance\n";
        assert!(err(&format!("{h}400,0.3\n400,0.3\n401,0.3\n")).contains("s.csv:3: duplicate"));
        let zigzag = err(&format!("{h}400,0.3\n399,0.3\n401,0.3\n"));
        assert!(
            zigzag.contains("s.csv:4:") && zigzag.contains("must fall"),
            "{zigzag}"
        );
        let back = err(&format!("{h}400,0.3\n401,0.3\n400.5,0.3\n"));
        assert!(
            back.contains("s.csv:4:") && back.contains("must rise"),
            "{back}"
        );
        assert!(err(&format!("{h}400,0.3\n401,NaN\n402,0.3\n")).contains("s.csv:3:"));
        assert!(err(&format!("{h}400,0.3\n401,x\n402,0.3\n")).contains("not a number"));
        assert!(err(&format!("{h}400,30\n401,31\n402,32\n")).contains("percent"));
        assert!(err(&format!("{h}0.4,0.3\n0.5,0.3\n0.6,0.3\n")).contains("µm"));
        assert!(err("wl,r\n").contains("s.csv:1: header"));
        assert!(err("").contains("no header"));
        assert!(err(&format!("{h}400,0.3,1\n")).contains("s.csv:2: 3 fields"));
        let dark =
            "wavelength_nm,sample,dark,reference\n400,10,10,200\n401,9,10,210\n402,10,10,220\n";
        assert!(err(dark).contains("sample counts never exceed the dark"));
        let sat = "wavelength_nm,sample,dark,reference\n400,100,10,65535\n401,101,10,65535\n402,102,10,65535\n403,99,10,200\n";
        assert!(
            err(sat).contains("s.csv:2: reference counts are saturated"),
            "{}",
            err(sat)
        );
    }

    #[test]
    fn more_rows_than_any_spectrometer_has_pixels_are_refused() {
        let mut text = String::from("wavelength_nm,reflectance\n");
        for i in 0..=MAX_PIXELS {
            text.push_str(&format!("{},0.3\n", 400.0 + i as f64 * 0.001));
        }
        let e = err(&text);
        assert!(
            e.contains(&format!(
                "s.csv:{}: more than {MAX_PIXELS} data rows",
                MAX_PIXELS + 2
            )),
            "{e}"
        );
        // One row fewer is a spectrum.
        let cut = text.trim_end().rfind('\n').unwrap() + 1;
        assert!(parse_csv(&text[..cut], Path::new("s.csv")).is_ok());
    }

    #[test]
    fn a_file_larger_than_any_spectrum_is_refused_before_it_is_read() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("huge.csv");
        // Sparse: the size is there, the disk blocks are not.
        let f = std::fs::File::create(&path).unwrap();
        f.set_len(MAX_FILE_BYTES + 1).unwrap();
        let e = read_csv(&path).unwrap_err().to_string();
        assert!(
            e.contains(&format!("{} bytes", MAX_FILE_BYTES + 1))
                && e.contains(&format!("at most {MAX_FILE_BYTES} bytes")),
            "{e}"
        );
    }

    #[test]
    fn a_file_reads_as_its_text_parses() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("s.csv");
        for text in [
            "\u{feff}# c\r\nwavelength_nm,reflectance\r\n402,0.32\r\n401,0.31\r\n400,0.3",
            "wavelength_nm,sample,dark,reference\n400,100,10,200\n\n401,110,10,210\n402,120,10,220\n",
            "wavelength_nm,reflectance\n400,0.3\n401,x\n",
        ] {
            std::fs::write(&path, text).unwrap();
            let (file, parsed) = (read_csv(&path), parse_csv(text, &path));
            assert_eq!(format!("{file:?}"), format!("{parsed:?}"), "{text:?}");
        }
    }

    #[test]
    fn a_falling_file_reads_as_the_rising_one() {
        let rising = "wavelength_nm,reflectance\n400,0.3\n401,0.31\n402,0.32\n";
        let falling = "wavelength_nm,reflectance\n402,0.32\n401,0.31\n400,0.3\n";
        assert_eq!(
            parse_csv(falling, Path::new("f.csv")).unwrap(),
            parse_csv(rising, Path::new("r.csv")).unwrap()
        );
        let sat = "wavelength_nm,sample,dark,reference\n403,99,10,200\n402,102,10,65535\n401,101,10,65535\n400,100,10,65535\n";
        assert!(
            err(sat).contains("s.csv:5: reference counts are saturated"),
            "{}",
            err(sat)
        );
    }

    #[test]
    fn written_files_read_back() {
        let s = Spectrum {
            wavelength_nm: vec![400.0, 400.5, 401.25],
            reflectance: vec![0.1, 0.123456789012, 0.3],
        };
        let mut buf = Vec::new();
        write_reflectance_csv(&mut buf, &s, &["site 3".into()]).unwrap();
        let back = parse_csv(std::str::from_utf8(&buf).unwrap(), Path::new("x")).unwrap();
        assert_eq!(back, SpectrumFile::Reflectance(s.clone()));
        let c = |v: Vec<f64>| Counts {
            wavelength_nm: s.wavelength_nm.clone(),
            counts: v,
        };
        let raw = RawSpectrum {
            sample: c(vec![100.0, 200.0, 300.0]),
            dark: c(vec![10.0, 11.0, 12.0]),
            reference: c(vec![400.0, 500.0, 600.0]),
        };
        let mut buf = Vec::new();
        write_counts_csv(&mut buf, &raw, &[]).unwrap();
        let back = parse_csv(std::str::from_utf8(&buf).unwrap(), Path::new("x")).unwrap();
        assert_eq!(back, SpectrumFile::Counts(raw));
    }
}
