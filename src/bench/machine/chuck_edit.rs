//! Writing a measured wafer centre and rotation into a machine file's `[chuck]` section as
//! text, so every other line, comment and blank stays as the lab wrote it.
//!
//! The `center_mm` and `rotation_deg` lines of `[chuck]` are replaced (a trailing comment
//! kept), or added after the header when missing; a file without `[chuck]` gets the section at
//! its end. The result is parsed again and must hold exactly the values written, so a layout
//! this edit does not understand (a dotted `chuck.center_mm` key, an inline table) is refused
//! rather than written wrong.

use super::{parse, MachineError};
use std::path::Path;

/// Why the `[chuck]` keys could not be written.
#[derive(Debug, thiserror::Error)]
pub enum ChuckEditError {
    #[error("{path}: the edited machine file does not parse ({source}); nothing was written: set [chuck] center_mm and rotation_deg by hand")]
    Invalid {
        path: String,
        #[source]
        source: MachineError,
    },
    #[error("{path}: [chuck] is laid out in a way this edit does not follow (a dotted or inline key?); nothing was written: set center_mm = [{x:.3}, {y:.3}] and rotation_deg = {r:.3} in [chuck] by hand")]
    Layout {
        path: String,
        x: f64,
        y: f64,
        r: f64,
    },
}

/// Whether a line is a table header (`[name]` or `[[name]]`).
fn is_header(line: &str) -> bool {
    let t = line.trim_start();
    t.starts_with('[')
        && t.split('#')
            .next()
            .is_some_and(|h| h.trim_end().ends_with(']'))
}

/// Whether `line` sets `key` (`key = …`, any spacing).
fn sets(line: &str, key: &str) -> bool {
    line.trim_start()
        .strip_prefix(key)
        .is_some_and(|rest| rest.trim_start().starts_with('='))
}

/// `line` with its value replaced by `value`, indentation and a trailing comment kept (the
/// values written here are a number or a flat array: no `#` inside them).
fn replaced(line: &str, key: &str, value: &str) -> String {
    let indent = &line[..line.len() - line.trim_start().len()];
    let comment = line
        .find('#')
        .map(|i| format!("  {}", line[i..].trim_end()))
        .unwrap_or_default();
    format!("{indent}{key} = {value}{comment}")
}

/// `text` with `[chuck] center_mm` and `rotation_deg` set; `path` names the file in errors.
pub fn set_chuck(
    text: &str,
    path: &Path,
    center_mm: [f64; 2],
    rotation_deg: f64,
) -> Result<String, ChuckEditError> {
    let (x, y, r) = (
        round3(center_mm[0]),
        round3(center_mm[1]),
        round3(rotation_deg),
    );
    let values = [
        ("center_mm", format!("[{x}, {y}]")),
        ("rotation_deg", format!("{r}")),
    ];
    let mut lines: Vec<String> = text.lines().map(String::from).collect();
    let header = lines
        .iter()
        .position(|l| is_header(l) && l.trim_start().starts_with("[chuck]"));
    match header {
        None => {
            if lines.last().is_some_and(|l| !l.trim().is_empty()) {
                lines.push(String::new());
            }
            lines.push("[chuck]".into());
            lines.extend(values.iter().map(|(k, v)| format!("{k} = {v}")));
        }
        Some(h) => {
            let end = lines[h + 1..]
                .iter()
                .position(|l| is_header(l))
                .map_or(lines.len(), |i| h + 1 + i);
            let mut insert_at = h + 1;
            for (key, value) in &values {
                match (h + 1..end).find(|&i| sets(&lines[i], key)) {
                    Some(i) => lines[i] = replaced(&lines[i], key, value),
                    None => {
                        lines.insert(insert_at, format!("{key} = {value}"));
                        insert_at += 1;
                    }
                }
            }
        }
    }
    let mut out = lines.join("\n");
    if text.ends_with('\n') || header.is_none() {
        out.push('\n');
    }
    let name = path.display().to_string();
    let m = parse(&out, path).map_err(|source| ChuckEditError::Invalid {
        path: name.clone(),
        source,
    })?;
    if m.chuck.center_mm != [x, y] || m.chuck.rotation_deg != r {
        return Err(ChuckEditError::Layout {
            path: name,
            x,
            y,
            r,
        });
    }
    Ok(out)
}

/// Rounded to a micrometre (or a thousandth of a degree): far below what centring resolves.
fn round3(v: f64) -> f64 {
    (v * 1000.0).round() / 1000.0
}

#[cfg(test)]
mod tests {
    use super::*;

    const FILE: &str = "# bench A, room 2\nname = \"bench-a\"\n[stage]\nport = \"simulated\"\n\
        travel_x_mm = [0, 300]   # measured 2026-11\ntravel_y_mm = [0, 300]\n\n[chuck]\n\
        center_mm = [150, 150]   # by eye\nflip_x = false\n\n[spectrometer]\nkind = \"simulated\"\n";

    #[test]
    fn replaces_the_keys_and_keeps_every_other_line_and_comment() {
        let out = set_chuck(FILE, Path::new("a.toml"), [151.23456, 148.5], -1.25).unwrap();
        assert!(
            out.contains("center_mm = [151.235, 148.5]  # by eye"),
            "{out}"
        );
        assert!(out.contains("[chuck]\nrotation_deg = -1.25\n"), "{out}");
        for kept in [
            "# bench A, room 2",
            "travel_x_mm = [0, 300]   # measured 2026-11",
            "flip_x = false",
            "[spectrometer]",
        ] {
            assert!(out.contains(kept), "{kept} lost: {out}");
        }
        assert_eq!(out.lines().count(), FILE.lines().count() + 1);
        let m = parse(&out, Path::new("a.toml")).unwrap();
        assert_eq!(m.chuck.center_mm, [151.235, 148.5]);
        assert_eq!(m.chuck.rotation_deg, -1.25);
    }

    #[test]
    fn adds_a_missing_section_and_refuses_a_layout_it_cannot_follow() {
        let stage =
            "[stage]\nport = \"simulated\"\ntravel_x_mm = [0, 300]\ntravel_y_mm = [0, 300]\n";
        let bare = format!("name = \"b\"\n{stage}");
        let out = set_chuck(&bare, Path::new("b.toml"), [100.0, 101.0], 0.5).unwrap();
        assert!(out.starts_with(&bare));
        assert!(
            out.ends_with("\n[chuck]\ncenter_mm = [100, 101]\nrotation_deg = 0.5\n"),
            "{out}"
        );
        // The file itself is valid; only the edit would break it.
        let inline = format!("name = \"c\"\nchuck = {{ center_mm = [1, 2] }}\n{stage}");
        parse(&inline, Path::new("c.toml")).unwrap();
        let e = set_chuck(&inline, Path::new("c.toml"), [3.0, 4.0], 0.0).unwrap_err();
        assert!(e.to_string().contains("set [chuck] center_mm"), "{e}");
    }
}
