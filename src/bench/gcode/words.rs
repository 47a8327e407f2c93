//! Safety check of the G-code lines a machine file asks isopach to send as written (`init`,
//! `unlock`, `home`, `stop`, `wait_line`, `status_query`, `reset`).
//!
//! isopach generates every move itself and checks it against the soft limits; a line from
//! the machine file is not checked that way, so it must not move the stage or change how
//! the controller reads the moves that follow. Refused: motion words (G0–G3, G5, G38.x,
//! G28/G30 outside homing lines, G53), coordinate and offset changes (G10, G92, G54–G59,
//! M206, M428), unit and distance modes other than millimetres and absolute (G20, G91,
//! G91.1), axis words with values (X9999), scaling and limit changes (M92, M211, M500–M502,
//! grbl `$n=` settings, `$J` jogs, `$N` start-up blocks, `$C`), and control characters.
//! Words are parsed properly: case-insensitive, `( … )` and `;` comments, spaces between
//! letter and number, several words per line, `N` line numbers and `*` checksums.

/// What a line is for: homing lines may also hold homing commands.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LineRole {
    /// Set-up, unlock, stop, wait and status lines.
    Setup,
    /// Homing lines (`stage.home`).
    Home,
}

/// One G-code word: a letter and its number.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Word {
    pub letter: char,
    pub value: f64,
}

/// Axis letters: a value after one of them is a position.
const AXES: &str = "XYZABCUVWIJKE";
/// G codes a set-up line may hold (tenths, so G90.1 would be 901): dwell, planes, mm,
/// cutter and tool-length compensation off, path control, cancel canned cycle, absolute,
/// feed per minute.
const SETUP_G: [i64; 12] = [40, 170, 180, 190, 210, 400, 490, 610, 640, 800, 900, 940];
/// Marlin-style M codes that rescale axes, shift the origin, switch off the firmware's own
/// limits or load settings that may do so.
const FORBIDDEN_M: [i64; 7] = [92, 206, 211, 428, 500, 501, 502];
/// grbl system commands a line may be (besides `$H…` on homing lines).
const SYSTEM_OK: [&str; 5] = ["$X", "$$", "$#", "$G", "$I"];
/// One-character real-time commands of grbl-style firmware (status, hold, resume).
const REALTIME_OK: [&str; 3] = ["?", "!", "~"];

/// Why `line` must not be sent as written, if it must not.
pub fn refusal(line: &str, role: LineRole) -> Option<String> {
    if let Some(c) = line.chars().find(|c| c.is_control()) {
        return Some(format!(
            "control character U+{:04X} in a G-code line: write each line as plain text (a line break means two lines: list them separately)",
            c as u32
        ));
    }
    let t = line.trim();
    if REALTIME_OK.contains(&t) {
        return None;
    }
    if t.starts_with('$') {
        return system_refusal(t, role);
    }
    let words = match parse(t) {
        Ok(w) => w,
        Err(e) => return Some(e),
    };
    let homing = role == LineRole::Home && words.iter().any(|w| code(w, 'G') == Some(280));
    for w in &words {
        if let Some(why) = word_refusal(w, homing) {
            return Some(why);
        }
    }
    None
}

/// A G or M word's code in tenths (`G38.2` → 382), if `w` is that letter.
fn code(w: &Word, letter: char) -> Option<i64> {
    (w.letter == letter).then(|| (w.value * 10.0).round() as i64)
}

fn word_refusal(w: &Word, homing: bool) -> Option<String> {
    let shown = if w.value.is_nan() {
        w.letter.to_string()
    } else if w.value.fract() == 0.0 {
        format!("{}{}", w.letter, w.value)
    } else {
        format!("{}{:.1}", w.letter, w.value)
    };
    match w.letter {
        'G' => {
            let c = code(w, 'G')?;
            if SETUP_G.contains(&c) || (homing && c == 280) {
                return None;
            }
            let why = match c {
                0 | 10 | 20 | 30 | 50 | 530 => "moves the stage",
                280 | 300 => "moves the stage (homing belongs in stage.home)",
                381..=385 => "is a probing move",
                200 => "switches to inches; isopach sends millimetres (G21)",
                910 | 911 => "switches to relative moves; isopach sends absolute positions (G90)",
                100 | 920..=923 | 540..=590 => "changes the coordinate origin",
                _ => "is not a set-up code isopach knows to be safe",
            };
            Some(format!(
                "{shown} {why}: lines from the machine file may not move the stage or change units, distance mode or origin"
            ))
        }
        'M' => {
            let c = code(w, 'M')? / 10;
            FORBIDDEN_M.contains(&c).then(|| {
                format!("{shown} changes axis scaling, origin or the firmware's limits: set it up with the controller's own tool, not in the machine file")
            })
        }
        l if AXES.contains(l) && !(homing && (w.value == 0.0 || w.value.is_nan())) => Some(format!(
            "{shown} is a position: lines from the machine file may not hold axis words with values (isopach sends every move itself, inside the soft limits)"
        )),
        _ => None,
    }
}

/// grbl `$` commands: only a few read-only ones, unlock, and homing on homing lines.
fn system_refusal(t: &str, role: LineRole) -> Option<String> {
    let u: String = t
        .to_uppercase()
        .chars()
        .filter(|c| !c.is_whitespace())
        .collect();
    if SYSTEM_OK.contains(&u.as_str()) {
        return None;
    }
    if u.starts_with("$H") && u[2..].chars().all(|c| "XYZ".contains(c)) {
        return (role != LineRole::Home)
            .then(|| format!("{t} homes the stage: homing lines belong in stage.home"));
    }
    Some(format!(
        "{t} is not allowed: machine-file lines may use $X, $$, $#, $G, $I (and $H in stage.home); jogs, start-up blocks, check mode and settings writes are refused"
    ))
}

/// The words of a G-code line (comments dropped, `N` numbers and `*` checksums allowed).
pub fn parse(line: &str) -> Result<Vec<Word>, String> {
    let mut words = Vec::new();
    let mut chars = line.chars().peekable();
    let mut in_paren = false;
    while let Some(c) = chars.next() {
        if in_paren {
            in_paren = c != ')';
            continue;
        }
        match c {
            '(' => in_paren = true,
            ';' => break,
            '*' => {
                // Checksum: digits to the end of the line.
                let rest: String = chars.by_ref().collect();
                if !rest.trim().chars().all(|c| c.is_ascii_digit()) {
                    return Err(format!("\"{line}\": a checksum after * must be digits"));
                }
                break;
            }
            c if c.is_whitespace() => {}
            c if c.is_ascii_alphabetic() => {
                while chars.peek().is_some_and(|c| c.is_whitespace()) {
                    chars.next();
                }
                let mut num = String::new();
                while let Some(&d) = chars.peek() {
                    let sign_ok = num.is_empty() && (d == '+' || d == '-');
                    if d.is_ascii_digit() || d == '.' || sign_ok {
                        num.push(d);
                        chars.next();
                    } else if d.is_whitespace() && !num.is_empty() {
                        // Spaces inside a number ("X 1 0") are allowed by some readers.
                        let ahead: String = chars
                            .clone()
                            .skip_while(|c| c.is_whitespace())
                            .take(1)
                            .collect();
                        if ahead.chars().all(|a| a.is_ascii_digit() || a == '.')
                            && !ahead.is_empty()
                        {
                            chars.next();
                        } else {
                            break;
                        }
                    } else {
                        break;
                    }
                }
                let letter = c.to_ascii_uppercase();
                let value = if num.is_empty() {
                    // A bare axis letter (as in `G28 X Y`) selects an axis.
                    if AXES.contains(letter) {
                        f64::NAN
                    } else {
                        return Err(format!("\"{line}\": {c} has no number after it"));
                    }
                } else {
                    num.parse()
                        .map_err(|_| format!("\"{line}\": {c}{num} is not a number"))?
                };
                words.push(Word { letter, value });
            }
            _ => {
                return Err(format!(
                    "\"{line}\": '{c}' is not part of a G-code word: write words like G21 or M400"
                ))
            }
        }
    }
    if in_paren {
        return Err(format!("\"{line}\": a comment opened with ( is not closed"));
    }
    Ok(words)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn setup_lines_of_common_firmware_pass() {
        for l in [
            "G21",
            "G90",
            "g21 g90",
            "G4 P0",
            "M400",
            "M114",
            "$X",
            "?",
            "M410",
            "N10 G21*33",
            "G21 (mm) ; note",
            "F3000",
        ] {
            assert_eq!(refusal(l, LineRole::Setup), None, "{l}");
        }
        for l in ["$H", "G28", "G28 X Y", "G28 X0 Y0"] {
            assert_eq!(refusal(l, LineRole::Home), None, "{l}");
        }
    }

    #[test]
    fn motion_and_mode_changes_are_refused() {
        for l in [
            "G91",
            "G20",
            "G0 X9999 Y9999",
            "g 1 x10",
            "G91.1",
            "G38.2 Z-5",
            "G92 X0",
            "G55",
            "X10",
            "$J=X10F100",
            "$N0=G91",
            "$100=80",
            "M206 X5",
            "G28",
            "$H",
            "G53 G0 X0",
            "G21\nG91",
            "G21\u{1b}",
        ] {
            assert!(
                refusal(l, LineRole::Setup).is_some(),
                "{l} should be refused"
            );
        }
        assert!(refusal("G28 X100", LineRole::Home).is_some());
        assert!(refusal("G28 G91", LineRole::Home).is_some());
    }

    #[test]
    fn words_parse_with_comments_and_spaces() {
        let w = parse("g 1 x 1 0 (move) y-2.5 ; rest").unwrap();
        assert_eq!(
            w,
            vec![
                Word {
                    letter: 'G',
                    value: 1.0
                },
                Word {
                    letter: 'X',
                    value: 10.0
                },
                Word {
                    letter: 'Y',
                    value: -2.5
                }
            ]
        );
        assert!(parse("G1 (open").is_err());
    }
}
