//! G-code line codec: formats the lines sent and classifies the lines received. Pure.
//!
//! Numbers go out with three decimals (µm resolution, what grbl-style reports carry); lines end
//! in LF only. Replies are classified by the machine file's reply words ([`Vocabulary`]):
//! acknowledgements, numbered or worded errors, alarms, keep-alives, status reports in angle
//! brackets (`<State|MPos:x,y,z|…>` and the older comma form), bracketed messages, position
//! reports without a state word (`X:1.00 Y:2.00 …`), unreadable lines, and everything else
//! (banners, echoes).

use crate::bench::machine::RepliesSpec;

/// A move line: `G1 X… Y… F…` (linear move at a feed in mm/min).
pub fn move_line(x_mm: f64, y_mm: f64, feed_mm_min: f64) -> String {
    format!(
        "G1 X{} Y{} F{}",
        number(x_mm),
        number(y_mm),
        feed(feed_mm_min)
    )
}

/// A coordinate with three decimals and no negative zero.
pub fn number(v: f64) -> String {
    let s = format!("{v:.3}");
    if s == "-0.000" {
        "0.000".into()
    } else {
        s
    }
}

/// A feed rate: whole numbers without decimals.
fn feed(v: f64) -> String {
    if (v - v.round()).abs() < 1e-9 {
        format!("{}", v.round() as i64)
    } else {
        format!("{v:.1}")
    }
}

/// The reply words of one controller, from the machine file (lower-cased for matching).
#[derive(Debug, Clone, PartialEq)]
pub struct Vocabulary {
    ok: Vec<String>,
    error: Vec<String>,
    alarm: Vec<String>,
    busy: Vec<String>,
    idle_states: Vec<String>,
    alarm_states: Vec<String>,
    locked: Vec<String>,
}

fn lower(v: &[String]) -> Vec<String> {
    v.iter()
        .map(|s| s.trim().to_lowercase())
        .filter(|s| !s.is_empty())
        .collect()
}

impl Vocabulary {
    /// The vocabulary of a machine file's `[stage.replies]`.
    pub fn from_spec(r: &RepliesSpec) -> Vocabulary {
        Vocabulary {
            ok: lower(&r.ok),
            error: lower(&r.error),
            alarm: lower(&r.alarm),
            busy: lower(&r.busy),
            idle_states: lower(&r.idle_states),
            alarm_states: lower(&r.alarm_states),
            locked: lower(&r.locked),
        }
    }

    /// Whether an error reply says the controller is locked in an alarm.
    pub fn is_locked(&self, reply: &str) -> bool {
        let r = reply.trim().to_lowercase();
        self.locked.iter().any(|w| r.starts_with(w.as_str()))
    }

    /// Whether a status state word means "not moving".
    pub fn is_idle(&self, state: &str) -> bool {
        self.idle_states.iter().any(|s| *s == state.to_lowercase())
    }

    /// Whether a status state word means an alarm.
    pub fn is_alarm(&self, state: &str) -> bool {
        self.alarm_states.iter().any(|s| *s == state.to_lowercase())
    }
}

impl Default for Vocabulary {
    fn default() -> Self {
        Vocabulary::from_spec(&RepliesSpec::default())
    }
}

/// A status report: state word (if any) and positions.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct StatusReport {
    /// The state word without its sub-state (`Hold:0` → `Hold`); `None` for a bare position.
    pub state: Option<String>,
    /// Machine position (x, y), mm.
    pub mpos: Option<[f64; 2]>,
    /// Work position (x, y), mm.
    pub wpos: Option<[f64; 2]>,
    /// Work coordinate offset (x, y), mm, when the report carries it.
    pub wco: Option<[f64; 2]>,
}

/// One received line, classified.
#[derive(Debug, Clone, PartialEq)]
pub enum Reply {
    /// An acknowledgement (for a move: queued, not arrived).
    Ok,
    /// A rejected line, with its number when the reply carries one (`error:20`).
    Error {
        code: Option<u32>,
        text: String,
    },
    /// An alarm (`ALARM:1`).
    Alarm {
        code: Option<u32>,
        text: String,
    },
    /// A keep-alive from a busy controller.
    Busy,
    Status(StatusReport),
    /// A bracketed message (`[MSG:…]`), informative.
    Message(String),
    /// A line with control characters or invalid bytes: noise or a wrong baud rate.
    Garbled(String),
    /// Anything else: banners, echoes, unsolicited text.
    Other(String),
}

fn starts_with_any(line_lower: &str, words: &[String]) -> bool {
    words.iter().any(|w| line_lower.starts_with(w.as_str()))
}

/// The number after the first `:` of a reply such as `error:20`, if there is one.
fn code_of(line: &str) -> Option<u32> {
    let (_, rest) = line.split_once(':')?;
    let digits: String = rest
        .trim()
        .chars()
        .take_while(|c| c.is_ascii_digit())
        .collect();
    digits.parse().ok()
}

/// Classifies a received line (without its line end). Empty lines give `None`.
pub fn classify(line: &str, vocab: &Vocabulary) -> Option<Reply> {
    let t = line.trim_matches(|c: char| c == ' ' || c == '\t' || c == '\r' || c == '\n');
    if t.is_empty() {
        return None;
    }
    if t.chars()
        .any(|c| (c.is_control() && c != '\t') || c == char::REPLACEMENT_CHARACTER)
    {
        return Some(Reply::Garbled(t.to_string()));
    }
    let l = t.to_lowercase();
    if t.starts_with('<') && t.ends_with('>') {
        return Some(match parse_status(t) {
            Some(s) => Reply::Status(s),
            None => Reply::Garbled(t.to_string()),
        });
    }
    Some(if starts_with_any(&l, &vocab.alarm) {
        Reply::Alarm {
            code: code_of(t),
            text: t.to_string(),
        }
    } else if starts_with_any(&l, &vocab.error) {
        Reply::Error {
            code: code_of(t),
            text: t.to_string(),
        }
    } else if starts_with_any(&l, &vocab.busy) {
        Reply::Busy
    } else if starts_with_any(&l, &vocab.ok) {
        Reply::Ok
    } else if t.starts_with('[') && t.ends_with(']') {
        Reply::Message(t.to_string())
    } else if let Some(s) = parse_bare_position(t) {
        Reply::Status(s)
    } else {
        Reply::Other(t.to_string())
    })
}

/// The first two numbers after `key` in `s` (`MPos:1.0,2.0,3.0` → [1, 2]).
fn field(s: &str, key: &str) -> Option<[f64; 2]> {
    let i = s.find(key)?;
    let mut nums = s[i + key.len()..]
        .split([',', '|', '>'])
        .map(|v| v.trim().parse::<f64>());
    let x = nums.next()?.ok()?;
    let y = nums.next()?.ok()?;
    Some([x, y])
}

/// Parses `<State|MPos:…|WPos:…|WCO:…>` or `<State,MPos:…,WPos:…>`.
pub fn parse_status(line: &str) -> Option<StatusReport> {
    let inner = line.trim().strip_prefix('<')?.strip_suffix('>')?;
    let state_end = inner.find(['|', ',']).unwrap_or(inner.len());
    let state = inner[..state_end].split(':').next()?.trim();
    if state.is_empty() || !state.chars().all(|c| c.is_ascii_alphabetic()) {
        return None;
    }
    let report = StatusReport {
        state: Some(state.to_string()),
        mpos: field(inner, "MPos:"),
        wpos: field(inner, "WPos:"),
        wco: field(inner, "WCO:"),
    };
    Some(report)
}

/// Parses a position report without a state word: `X:10.00 Y:20.00 Z:0.00 …` (the part before
/// any `Count`, which some firmware appends in steps).
fn parse_bare_position(line: &str) -> Option<StatusReport> {
    if !line.starts_with("X:") {
        return None;
    }
    let head = line.split(" Count").next().unwrap_or(line);
    let mut x = None;
    let mut y = None;
    for tok in head.split_whitespace() {
        if let Some(v) = tok.strip_prefix("X:") {
            x = v.parse::<f64>().ok();
        } else if let Some(v) = tok.strip_prefix("Y:") {
            y = v.parse::<f64>().ok();
        }
    }
    Some(StatusReport {
        state: None,
        mpos: None,
        wpos: Some([x?, y?]),
        wco: None,
    })
}

/// Whether a byte sequence is a real-time command (one byte, sent without a line end).
pub fn is_realtime(query: &str) -> bool {
    query.chars().count() == 1
}

#[cfg(test)]
mod tests {
    use super::*;

    fn c(line: &str) -> Reply {
        classify(line, &Vocabulary::default()).unwrap()
    }

    #[test]
    fn formats_moves_with_three_decimals() {
        assert_eq!(move_line(10.0, -0.0001, 3000.0), "G1 X10.000 Y0.000 F3000");
        assert_eq!(
            move_line(99.5, 12.3456, 1500.5),
            "G1 X99.500 Y12.346 F1500.5"
        );
    }

    #[test]
    fn classifies_common_replies() {
        assert_eq!(c("ok"), Reply::Ok);
        assert_eq!(c("ok T:20.0 /0.0"), Reply::Ok);
        assert_eq!(
            c("error:20"),
            Reply::Error {
                code: Some(20),
                text: "error:20".into()
            }
        );
        assert_eq!(
            c("Error:Unknown command"),
            Reply::Error {
                code: None,
                text: "Error:Unknown command".into()
            }
        );
        assert_eq!(
            c("ALARM:1"),
            Reply::Alarm {
                code: Some(1),
                text: "ALARM:1".into()
            }
        );
        assert_eq!(c("echo:busy: processing"), Reply::Busy);
        assert!(matches!(c("[MSG:'$H'|'$X' to unlock]"), Reply::Message(_)));
        assert!(matches!(c("Grbl 1.1h ['$' for help]"), Reply::Other(_)));
        assert!(matches!(c("\u{7}\u{1b}x"), Reply::Garbled(_)));
        assert!(matches!(c("ab\u{fffd}cd"), Reply::Garbled(_)));
        assert!(classify("  \r", &Vocabulary::default()).is_none());
    }

    #[test]
    fn parses_both_status_forms_and_bare_positions() {
        let Reply::Status(s) = c("<Idle|MPos:1.000,2.500,0.000|FS:0,0|WCO:0.500,0.000,0.000>")
        else {
            panic!()
        };
        assert_eq!(s.state.as_deref(), Some("Idle"));
        assert_eq!(s.mpos, Some([1.0, 2.5]));
        assert_eq!(s.wco, Some([0.5, 0.0]));
        let Reply::Status(s) = c("<Run,MPos:5.000,6.000,0.000,WPos:4.000,6.000,0.000>") else {
            panic!()
        };
        assert_eq!((s.mpos, s.wpos), (Some([5.0, 6.0]), Some([4.0, 6.0])));
        let Reply::Status(s) = c("<Hold:0|WPos:3.000,4.000,0.000>") else {
            panic!()
        };
        assert_eq!(s.state.as_deref(), Some("Hold"));
        let Reply::Status(s) = c("X:10.00 Y:20.00 Z:0.00 E:0.00 Count X:800 Y:1600 Z:0") else {
            panic!()
        };
        assert_eq!((s.state, s.wpos), (None, Some([10.0, 20.0])));
        assert!(matches!(c("<|||>"), Reply::Garbled(_)));
    }
}
