//! The run report: one page per wafer for the process log (1200 × 1700 layout px).
//!
//! The map page (wafer with site numbers and values, colour bar, figures, radial profile)
//! fills the top; below it, on the left, the verdict against the recipe's run limits and the
//! facts of the run (recipe, machine, wafer, lot, operator, times, tool version); on the
//! right, a histogram of the site values with the mean and the spec window; then the site
//! table (flags spelled as in `sites.csv`, attempts per site) and the cautions at the foot.

use super::{clip_chars, fmt, page, value_decimals, EXCLUDED, INK, MUTED, OUT_OF_SPEC, RULE};
use crate::map::colour::Rgb;
use crate::map::levels::nice_levels;
use crate::map::render::{MapInput, RenderOptions};
use crate::map::scene::{Anchor, Item, Scene, Stroke};
use crate::map::sheet::place;
use crate::map::stats::LayerSummary;
use crate::map::verdict::Verdict;
use crate::map::xy_plot::{Axis, Ticks, XyPlot};

/// Page size, layout px (about the A4 aspect).
pub const REPORT_WIDTH: f64 = super::WIDTH;
pub const REPORT_HEIGHT: f64 = 1700.0;

const PASS: Rgb = Rgb(0x1d, 0x6b, 0x3f);
const FAIL: Rgb = Rgb(0xa3, 0x1d, 0x2b);

/// Everything a report page shows.
#[derive(Debug, Clone)]
pub struct ReportInput {
    /// The map of the first fitted layer (its rows are the site table).
    pub map: MapInput,
    /// That layer's figures, with its spec check.
    pub figures: LayerSummary,
    /// PASS/FAIL against the recipe's run limits; `None` when it sets none.
    pub verdict: Option<Verdict>,
    /// Facts of the run in the order shown: (`recipe`, `oxide-150-49`), (`lot`, `L2612`)…
    pub facts: Vec<(String, String)>,
    /// Attempts per site number (sites measured more than once are re-measures).
    pub attempts: Vec<(usize, u32)>,
    /// What the reader should know before trusting the page.
    pub cautions: Vec<String>,
}

/// Lays out the report page.
pub fn report_page(input: &ReportInput) -> Scene {
    let opts = RenderOptions {
        values: true,
        numbers: true,
        ..RenderOptions::default()
    };
    let mut scene = Scene {
        width: REPORT_WIDTH,
        height: REPORT_HEIGHT,
        background: super::BACKGROUND,
        items: Vec::new(),
    };
    place(&mut scene, page(&input.map, &opts), 0.0, 0.0);
    rule(&mut scene, 786.0);
    let y = verdict_box(&mut scene, input.verdict.as_ref(), 24.0, 816.0);
    facts(&mut scene, &input.facts, 24.0, y + 18.0);
    histogram(&mut scene, input, (470.0, 806.0, 1176.0, 1046.0));
    rule(&mut scene, 1082.0);
    let bottom = site_table(&mut scene, input, 1108.0, 1606.0);
    cautions(&mut scene, &input.cautions, bottom + 14.0);
    scene
}

fn rule(scene: &mut Scene, y: f64) {
    scene.line(
        vec![(24.0, y), (REPORT_WIDTH - 24.0, y)],
        Stroke::solid(RULE, 1.0),
        "rule",
    );
}

/// The verdict: a large PASS or FAIL and one line per limit; returns the y below it.
fn verdict_box(scene: &mut Scene, verdict: Option<&Verdict>, x: f64, top: f64) -> f64 {
    scene.heading(x, top, "Verdict", INK);
    let Some(v) = verdict else {
        scene.text(
            x,
            top + 26.0,
            "none: the recipe's [accept] sets no run limits",
            12.5,
            Anchor::Start,
            MUTED,
            "verdict",
        );
        return top + 34.0;
    };
    let colour = if v.pass { PASS } else { FAIL };
    scene.items.push(Item::Rect {
        x,
        y: top + 10.0,
        w: 96.0,
        h: 38.0,
        fill: Some(colour),
        stroke: None,
    });
    scene.items.push(Item::Text {
        x: x + 48.0,
        y: top + 37.0,
        text: v.word().into(),
        size: 24.0,
        anchor: Anchor::Middle,
        bold: true,
        colour: Rgb(0xff, 0xff, 0xff),
        vertical: false,
        class: "verdict",
    });
    let mut y = top + 22.0;
    for c in &v.checks {
        let (mark, ink) = if c.pass { ("✓", INK) } else { ("✗", FAIL) };
        scene.text(
            x + 108.0,
            y,
            format!("{mark} {}", c.text()),
            11.5,
            Anchor::Start,
            ink,
            "verdict-check",
        );
        y += 16.0;
    }
    y.max(top + 56.0)
}

/// The facts of the run as label and value lines.
fn facts(scene: &mut Scene, facts: &[(String, String)], x: f64, top: f64) {
    scene.heading(x, top, "Run", INK);
    let mut y = top + 20.0;
    for (label, value) in facts {
        scene.text(
            x,
            y,
            label.clone(),
            11.5,
            Anchor::Start,
            MUTED,
            "fact-label",
        );
        scene.text(
            x + 100.0,
            y,
            clip_chars(value, 48),
            11.5,
            Anchor::Start,
            INK,
            "fact",
        );
        y += 15.5;
    }
}

/// Bins of round width over `values`: (left edge, width, count).
pub fn bins(values: &[f64]) -> Vec<(f64, f64, usize)> {
    let (lo, hi) = values
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    if !lo.is_finite() {
        return Vec::new();
    }
    let target = (values.len() as f64).sqrt().ceil().clamp(4.0, 16.0) as usize;
    let step = nice_levels(lo, hi, target).step;
    let step = if step.is_finite() && step > 0.0 {
        step
    } else {
        // One value (or all equal): a single bin around it.
        (lo.abs() * 1e-3).max(1e-3)
    };
    let first = (lo / step).floor();
    let n = (((hi / step).floor() - first) as usize + 1).min(200);
    let mut counts = vec![0usize; n];
    for &v in values {
        let k = ((v / step).floor() - first) as usize;
        counts[k.min(n - 1)] += 1;
    }
    counts
        .into_iter()
        .enumerate()
        .map(|(k, c)| ((first + k as f64) * step, step, c))
        .collect()
}

/// The histogram of the valid site values, with the mean and the spec window.
fn histogram(
    scene: &mut Scene,
    input: &ReportInput,
    (left, top, right, bottom): (f64, f64, f64, f64),
) {
    scene.heading(left - 46.0, top + 10.0, "Histogram of site values", INK);
    let values: Vec<f64> = input
        .map
        .rows
        .iter()
        .filter_map(|r| r.valid_value(input.map.layer))
        .collect();
    let bins = bins(&values);
    let (Some(first), Some(last)) = (bins.first(), bins.last()) else {
        scene.text(
            left,
            top + 44.0,
            "no valid site: nothing to count",
            12.5,
            Anchor::Start,
            MUTED,
            "histogram-empty",
        );
        return;
    };
    let mut x_lo = first.0;
    let mut x_hi = last.0 + last.1;
    if let Some(s) = &input.figures.spec {
        x_lo = x_lo.min(s.lo_nm);
        x_hi = x_hi.max(s.hi_nm);
    }
    let pad = 0.04 * (x_hi - x_lo);
    let most = bins.iter().map(|b| b.2).max().unwrap_or(1).max(1);
    let plot = XyPlot {
        left,
        top: top + 26.0,
        right,
        bottom: bottom - 6.0,
        x: Axis {
            lo: x_lo - pad,
            hi: x_hi + pad,
            title: format!("{} ({})", input.map.quantity, input.map.unit),
            ticks: Ticks::RoundNoGrid(7),
        },
        y: Axis {
            lo: 0.0,
            hi: most as f64 * 1.12,
            title: "sites".into(),
            ticks: Ticks::Round(4),
        },
        y_title_x: left - 40.0,
        style: super::PAGE_PLOT,
    };
    plot.axes(scene);
    let span = (values.iter().cloned().fold(f64::NEG_INFINITY, f64::max)
        - values.iter().cloned().fold(f64::INFINITY, f64::min))
    .max(1e-12);
    let lo_v = values.iter().cloned().fold(f64::INFINITY, f64::min);
    for &(edge, width, count) in bins.iter().filter(|b| b.2 > 0) {
        let (x0, x1) = (plot.px(edge), plot.px(edge + width));
        let y = plot.py(count as f64);
        scene.items.push(Item::Rect {
            x: x0 + 0.5,
            y,
            w: (x1 - x0 - 1.0).max(1.0),
            h: plot.bottom - y,
            fill: Some(crate::map::colour::scale(
                ((edge + width / 2.0 - lo_v) / span).clamp(0.0, 1.0),
            )),
            stroke: Some(Stroke::solid(Rgb(0x8a, 0x90, 0x96), 0.6)),
        });
    }
    if let Some(s) = &input.figures.spec {
        let spec = Stroke {
            colour: OUT_OF_SPEC,
            width: 1.6,
            dash: Some((5.0, 3.0)),
        };
        for v in [s.lo_nm, s.hi_nm] {
            plot.vline(scene, v, spec, "spec-window");
        }
    }
    let mean = input.figures.mean_nm;
    if mean.is_finite() {
        plot.vline(scene, mean, Stroke::solid(INK, 1.4), "mean");
        scene.text(
            plot.px(mean) + 4.0,
            plot.top + 12.0,
            format!("mean {}", fmt(mean, value_decimals(input.figures.std_nm))),
            10.5,
            Anchor::Start,
            INK,
            "mean-label",
        );
    }
}

/// Column offsets of one block of the site table: (title, x offset, anchor).
const COLUMNS: [(&str, f64, Anchor); 8] = [
    ("site", 26.0, Anchor::End),
    ("x mm", 72.0, Anchor::End),
    ("y mm", 118.0, Anchor::End),
    ("value", 186.0, Anchor::End),
    ("σ", 226.0, Anchor::End),
    ("GOF", 264.0, Anchor::End),
    ("att.", 292.0, Anchor::End),
    ("flag", 300.0, Anchor::Start),
];
const BLOCK_WIDTH: f64 = 576.0;
const BLOCKS: usize = 2;
/// Room for the flag column: every combination of the fit's flags fits whole, so a flag on
/// the page is spelled exactly as in `sites.csv` and `summary.json`.
const FLAG_CHARS: usize = 44;

/// The site table in two blocks side by side; returns the y below it. Sites that do not
/// fit are named in one line (all of them are in `sites.csv`).
fn site_table(scene: &mut Scene, input: &ReportInput, top: f64, bottom: f64) -> f64 {
    scene.heading(24.0, top, "Sites", INK);
    let rows = &input.map.rows;
    let room = ((bottom - top - 34.0) / 12.5).floor().max(1.0) as usize;
    let per_block = rows.len().div_ceil(BLOCKS).clamp(1, room);
    let row_h = if per_block * BLOCKS >= rows.len() && per_block <= 36 {
        13.0
    } else {
        12.5
    };
    let d = value_decimals(input.figures.std_nm);
    let spec = input.figures.spec.as_ref();
    let attempts = |site: usize| {
        input
            .attempts
            .iter()
            .find(|a| a.0 == site)
            .map(|a| a.1)
            .unwrap_or(0)
    };
    let mut y_end = top;
    for (b, chunk) in rows.chunks(per_block).take(BLOCKS).enumerate() {
        let x0 = 24.0 + b as f64 * BLOCK_WIDTH;
        let mut y = top + 24.0;
        for (title, dx, anchor) in COLUMNS {
            scene.text(x0 + dx, y, title, 10.5, anchor, MUTED, "table-head");
        }
        for r in chunk {
            y += row_h;
            let value = r
                .thickness_nm
                .get(input.map.layer)
                .copied()
                .unwrap_or(f64::NAN);
            let out = spec.is_some_and(|s| s.is_out(r.site));
            let ink = if !r.is_valid() {
                EXCLUDED
            } else if out {
                OUT_OF_SPEC
            } else {
                INK
            };
            let cells = [
                r.site.to_string(),
                format!("{:.1}", r.x_mm),
                format!("{:.1}", r.y_mm),
                fmt(value, d),
                fmt(
                    r.sigma_nm.get(input.map.layer).copied().unwrap_or(f64::NAN),
                    3,
                ),
                fmt(r.gof, 3),
                attempts(r.site).to_string(),
                clip_chars(&r.flag, FLAG_CHARS),
            ];
            for ((_, dx, anchor), text) in COLUMNS.iter().zip(cells) {
                scene.text(x0 + dx, y, text, 10.0, *anchor, ink, "site-row");
            }
        }
        y_end = y_end.max(y);
    }
    let shown = (per_block * BLOCKS).min(rows.len());
    if shown < rows.len() {
        y_end += 16.0;
        scene.text(
            24.0,
            y_end,
            format!(
                "sites {}–{} do not fit on the page: every site is in sites.csv",
                rows[shown].site,
                rows[rows.len() - 1].site
            ),
            11.0,
            Anchor::Start,
            MUTED,
            "table-more",
        );
    }
    y_end + 8.0
}

/// The cautions, one line each, as many as the page holds.
fn cautions(scene: &mut Scene, cautions: &[String], top: f64) {
    let lines = ((REPORT_HEIGHT - 14.0 - top) / 14.5).floor().max(0.0) as usize;
    if lines < 2 {
        return;
    }
    scene.heading(24.0, top + 4.0, "Cautions", INK);
    let text: Vec<String> = if cautions.is_empty() {
        vec!["none".into()]
    } else {
        cautions.to_vec()
    };
    let room = lines - 1;
    for (k, c) in text.iter().take(room).enumerate() {
        let line = if k + 1 == room && text.len() > room {
            format!("… and {} more (see log.txt)", text.len() - k)
        } else {
            clip_chars(c, 170)
        };
        scene.text(
            24.0,
            top + 22.0 + 14.5 * k as f64,
            line,
            11.0,
            Anchor::Start,
            INK,
            "caution",
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bins_count_every_value_once_at_round_edges() {
        let values: Vec<f64> = (0..49).map(|k| 990.0 + 0.5 * k as f64).collect();
        let b = bins(&values);
        assert_eq!(b.iter().map(|x| x.2).sum::<usize>(), 49);
        // Round width (1, 2, 2.5 or 5 × 10ⁿ) and the values inside the bins.
        let w = b[0].1;
        let mant = w / 10f64.powf(w.log10().floor());
        assert!(
            [1.0, 2.0, 2.5, 5.0].iter().any(|m| (m - mant).abs() < 1e-9),
            "{w}"
        );
        assert!(b[0].0 <= 990.0 && b.last().unwrap().0 + w > 1014.0);
        // One value: one bin holding it.
        let one = bins(&[1000.0]);
        assert_eq!(one.len(), 1);
        assert_eq!(one[0].2, 1);
        assert!(bins(&[]).is_empty());
    }

    #[test]
    fn clip_keeps_short_text_and_cuts_long_text() {
        assert_eq!(clip_chars("poor-fit", 14), "poor-fit");
        assert_eq!(clip_chars("abcdefghij", 5), "abcd…");
    }
}
