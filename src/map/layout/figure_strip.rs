//! The strip of figure tiles across the top of the map page: each tile a label, one large
//! figure and a small note (mean, 1σ, range, min, max, valid sites, in spec).

use super::{fmt, value_decimals, PageFacts, INK, MUTED, OUT_OF_SPEC, RULE, WIDTH};
use crate::map::colour::Rgb;
use crate::map::render::MapInput;
use crate::map::scene::{Anchor, Item, Scene, Stroke};
use crate::map::stats::LayerSummary;

/// Top and height of the strip, px.
const TOP: f64 = 84.0;
const HEIGHT: f64 = 58.0;

/// One tile: label, figure, note, and whether the figure is a warning.
struct Tile {
    label: String,
    figure: String,
    note: String,
    warn: bool,
}

fn tile(label: &str, figure: String, note: String) -> Tile {
    Tile {
        label: label.into(),
        figure,
        note,
        warn: false,
    }
}

/// Draws the tiles of layer summary `s`.
pub(super) fn figure_strip(
    scene: &mut Scene,
    input: &MapInput,
    s: &LayerSummary,
    facts: &PageFacts,
) {
    let u = &input.unit;
    let d = value_decimals(s.std_nm);
    let site = |n: Option<usize>| n.map(|n| format!("site {n}")).unwrap_or_default();
    let mut tiles = vec![
        tile(
            "mean",
            format!("{} {u}", fmt(s.mean_nm, d)),
            format!("of {} valid sites", s.sites_valid),
        ),
        tile(
            "1σ",
            format!("{} {u}", fmt(s.std_nm, d)),
            format!(
                "{} % · 3σ {}",
                fmt(s.nu_1sigma_pct, 2),
                fmt(s.three_sigma_nm, d)
            ),
        ),
        tile(
            "range",
            format!("{} {u}", fmt(s.range_nm, d)),
            format!("{} % of 2·mean", fmt(s.nu_range_pct, 2)),
        ),
        tile("min", format!("{} {u}", fmt(s.min_nm, d)), site(s.min_site)),
        tile("max", format!("{} {u}", fmt(s.max_nm, d)), site(s.max_site)),
        Tile {
            label: "valid sites".into(),
            figure: format!("{} of {}", s.sites_valid, s.sites_total),
            note: if s.excluded.is_empty() {
                "none excluded".into()
            } else {
                format!("{} excluded", s.excluded.len())
            },
            warn: false,
        },
    ];
    if facts.flat {
        tiles[2].note = "flat within noise".into();
    }
    if let Some(c) = &s.spec {
        tiles.push(Tile {
            label: format!("in spec {}–{} {u}", c.lo_nm, c.hi_nm),
            figure: format!("{} of {}", c.sites_in, c.checked()),
            note: if c.sites_out.is_empty() {
                "none out".into()
            } else {
                format!("{} out", c.sites_out.len())
            },
            warn: !c.sites_out.is_empty(),
        });
    }
    let (left, right) = (24.0, WIDTH - 24.0);
    let w = (right - left) / tiles.len() as f64;
    for (k, t) in tiles.into_iter().enumerate() {
        let x = left + k as f64 * w;
        scene.items.push(Item::Rect {
            x: x + 2.0,
            y: TOP,
            w: w - 4.0,
            h: HEIGHT,
            fill: Some(Rgb(0xff, 0xff, 0xff)),
            stroke: Some(Stroke::solid(RULE, 0.8)),
        });
        // A bar in the scale's darkest colour marks the strip as the page's figures.
        scene.items.push(Item::Rect {
            x: x + 2.0,
            y: TOP,
            w: 3.0,
            h: HEIGHT,
            fill: Some(if t.warn {
                OUT_OF_SPEC
            } else {
                crate::map::colour::scale(0.0)
            }),
            stroke: None,
        });
        let tx = x + 12.0;
        let chars = ((w - 18.0) / (0.6 * 11.0)) as usize;
        scene.text(
            tx,
            TOP + 15.0,
            super::clip_chars(&t.label, chars),
            11.0,
            Anchor::Start,
            MUTED,
            "stat-label",
        );
        scene.items.push(Item::Text {
            x: tx,
            y: TOP + 36.0,
            text: t.figure,
            size: 17.0,
            anchor: Anchor::Start,
            bold: true,
            colour: if t.warn { OUT_OF_SPEC } else { INK },
            vertical: false,
            class: "stat",
        });
        let note_chars = ((w - 18.0) / (0.6 * 10.0)) as usize;
        scene.text(
            tx,
            TOP + 51.0,
            super::clip_chars(&t.note, note_chars),
            10.0,
            Anchor::Start,
            MUTED,
            "stat-note",
        );
    }
}
