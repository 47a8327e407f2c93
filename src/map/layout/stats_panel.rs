//! The figures column of the map page: uniformity statistics, radial-fit centre and edge,
//! specification count, and the excluded and out-of-spec sites.

use super::{fmt, value_decimals, EXCLUDED, INK, MUTED, OUT_OF_SPEC, PANEL};
use crate::map::colour::Rgb;
use crate::map::render::MapInput;
use crate::map::scene::{Anchor, Item, Scene, Stroke};
use crate::map::stats::LayerSummary;

/// Draws the statistics of layer summary `s`.
pub(super) fn stats_panel(scene: &mut Scene, input: &MapInput, s: &LayerSummary) {
    let (x0, x1) = PANEL;
    let u = &input.unit;
    let d = value_decimals(s.std_nm);
    let site = |n: Option<usize>| n.map(|n| format!("  (site {n})")).unwrap_or_default();
    let mut rows: Vec<(String, String)> = vec![
        (
            "Sites valid".into(),
            format!("{} of {}", s.sites_valid, s.sites_total),
        ),
        ("Mean".into(), format!("{} {u}", fmt(s.mean_nm, d))),
        ("1σ".into(), format!("{} {u}", fmt(s.std_nm, d))),
        ("3σ".into(), format!("{} {u}", fmt(s.three_sigma_nm, d))),
        (
            "Min".into(),
            format!("{} {u}{}", fmt(s.min_nm, d), site(s.min_site)),
        ),
        (
            "Max".into(),
            format!("{} {u}{}", fmt(s.max_nm, d), site(s.max_site)),
        ),
        ("Range".into(), format!("{} {u}", fmt(s.range_nm, d))),
        (
            "Non-uniformity σ/mean".into(),
            format!("{} %", fmt(s.nu_1sigma_pct, 2)),
        ),
        (
            "Non-uniformity range/2·mean".into(),
            format!("{} %", fmt(s.nu_range_pct, 2)),
        ),
    ];
    if let Some(fit) = &s.radial {
        rows.push((
            "Centre → edge (radial fit)".into(),
            format!("{} → {} {u}", fmt(fit.centre_nm, d), fmt(fit.edge_nm, d)),
        ));
    }
    if let Some(c) = &s.spec {
        rows.push((
            format!("In spec {}–{} {u}", c.lo_nm, c.hi_nm),
            format!("{} of {}", c.sites_in, c.checked()),
        ));
    }
    scene.heading(x0, 104.0, "Uniformity", INK);
    let mut y = 130.0;
    for (label, value) in rows {
        scene.text(x0, y, label, 12.5, Anchor::Start, MUTED, "stat-label");
        scene.items.push(Item::Text {
            x: x1,
            y,
            text: value,
            size: 12.5,
            anchor: Anchor::End,
            bold: true,
            colour: INK,
            vertical: false,
            class: "stat",
        });
        scene.line(
            vec![(x0, y + 7.0), (x1, y + 7.0)],
            Stroke::solid(Rgb(0xe4, 0xe5, 0xe6), 0.6),
            "rule",
        );
        y += 21.0;
    }
    let ex = &s.excluded;
    let text = if ex.is_empty() {
        "Excluded: none".to_string()
    } else {
        let shown: Vec<String> = ex
            .iter()
            .map(|e| format!("{} ({})", e.site, e.flag))
            .collect();
        format!("Excluded {}: {}", ex.len(), first_few(&shown))
    };
    scene.text(
        x0,
        y + 4.0,
        text,
        11.5,
        Anchor::Start,
        if ex.is_empty() { MUTED } else { EXCLUDED },
        "excluded",
    );
    if let Some(c) = s.spec.as_ref().filter(|c| !c.sites_out.is_empty()) {
        let shown: Vec<String> = c.sites_out.iter().map(|n| n.to_string()).collect();
        let text = format!("Out of spec: site {}", first_few(&shown));
        scene.text(
            x0,
            y + 22.0,
            text,
            11.5,
            Anchor::Start,
            OUT_OF_SPEC,
            "out-of-spec",
        );
    }
}

/// The first four items joined by commas, with a count of the rest.
fn first_few(items: &[String]) -> String {
    let mut text = items.iter().take(4).cloned().collect::<Vec<_>>().join(", ");
    if items.len() > 4 {
        text.push_str(&format!(", +{} more", items.len() - 4));
    }
    text
}
