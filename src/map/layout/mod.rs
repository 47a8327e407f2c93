//! The map page laid out as a [`Scene`].
//!
//! isopach's page (1200 × 780 layout px) reads top to bottom, figures first: a header (recipe,
//! wafer, layer, time, lot, operator); a strip of figure tiles across the page (mean, 1σ,
//! range, extremes with their sites, valid and in-spec counts: [`figure_strip`]); below it the
//! profile column on the left (the radial profile, or the profile along the line for sites
//! that do not span the wafer, then the notes: fit, excluded and out-of-spec sites,
//! [`profile_column`]) and the wafer on the right (banded field, isolines, markers:
//! [`wafer`]) with a colour key that counts the sites in each band ([`colour_bar`]); a
//! one-line legend at the foot. What the sites can support is decided first
//! ([`super::evidence`]): a map or only a profile, structure or flat within noise.

mod colour_bar;
mod figure_strip;
mod line_profile;
mod profile_column;
mod radial_profile;
mod report;
mod wafer;

use super::colour::{self, Rgb};
use super::evidence::{flat_within_noise, median_sigma, site_line, SiteLine};
use super::interpolate::{Field, Grid};
use super::levels::{nice_levels_at_least, Levels};
use super::render::{MapInput, RenderOptions};
use super::scene::{self, Anchor, Item, Scene, Stroke};
use super::stats::{LayerSummary, SpecCheck, Summary};
use super::xy_plot::PlotStyle;
use colour_bar::colour_bar;
use figure_strip::figure_strip;
use profile_column::profile_column;
use wafer::{line_markers, markers, spec_rings, wafer_and_field};

pub use report::{bins, report_page, ReportInput, REPORT_HEIGHT, REPORT_WIDTH};

/// Page size, layout px.
pub const WIDTH: f64 = 1200.0;
pub const HEIGHT: f64 = 780.0;

const BACKGROUND: Rgb = Rgb(0xfb, 0xfa, 0xf7);
const INK: Rgb = Rgb(0x22, 0x20, 0x1d);
const MUTED: Rgb = Rgb(0x63, 0x5f, 0x58);
const RULE: Rgb = Rgb(0xcf, 0xcb, 0xc3);
const WAFER_RIM: Rgb = Rgb(0xe2, 0xe0, 0xdb);
/// Excluded sites: a slate blue, apart from every colour of the scale.
const EXCLUDED: Rgb = Rgb(0x2f, 0x4b, 0x8a);
/// The ring around a site outside the recipe's specification window.
const OUT_OF_SPEC: Rgb = Rgb(0xc2, 0x18, 0x6e);

/// The look of the XY plots on the map and report pages.
const PAGE_PLOT: PlotStyle = PlotStyle {
    ink: INK,
    muted: MUTED,
    grid: Rgb(0xec, 0xea, 0xe5),
    frame: RULE,
    fill: Some(Rgb(0xff, 0xff, 0xff)),
    tick_size: 10.5,
    title_size: 11.5,
};

/// Map square: left, top, side (px); the wafer diameter spans `MAP_SIDE − 2·MAP_MARGIN`.
const MAP_LEFT: f64 = 450.0;
const MAP_TOP: f64 = 154.0;
const MAP_SIDE: f64 = 596.0;
const MAP_MARGIN: f64 = 22.0;

/// The profile column: left and right edge, px.
const COLUMN: (f64, f64) = (24.0, 424.0);

/// What the page may claim, decided from the sites before anything is drawn.
#[derive(Debug, Clone)]
pub struct PageFacts {
    /// The line the sites lie along when they do not span the wafer: drawn as a profile.
    pub line: Option<SiteLine>,
    /// The measurement noise (median fit σ of the valid sites), nm.
    pub noise_nm: Option<f64>,
    /// The spread of the valid sites is what their noise alone would give.
    pub flat: bool,
    /// Isoline levels (none when flat; never closer than the noise).
    pub levels: Levels,
    /// The colour range.
    pub range: (f64, f64),
}

/// The valid sites of the mapped layer as (x mm, y mm, value).
fn valid_sites(input: &MapInput) -> Vec<(f64, f64, f64)> {
    input
        .rows
        .iter()
        .filter_map(|r| r.valid_value(input.layer).map(|v| (r.x_mm, r.y_mm, v)))
        .collect()
}

/// Decides what the page shows: a map or a profile, structure or flat within noise, and the
/// isoline levels (at least the noise apart).
pub fn page_facts(input: &MapInput, opts: &RenderOptions, grid: Option<&Grid>) -> PageFacts {
    let sites = valid_sites(input);
    let positions: Vec<(f64, f64)> = input.rows.iter().map(|r| (r.x_mm, r.y_mm)).collect();
    let line = site_line(&positions, 2.0 * input.wafer.usable_radius());
    let noise_nm = median_sigma(&input.rows, input.layer);
    let values: Vec<f64> = sites.iter().map(|s| s.2).collect();
    let flat = opts.range.is_none() && noise_nm.is_some_and(|n| flat_within_noise(&values, n));
    let range = value_range(opts, &sites, if line.is_some() { None } else { grid });
    let levels = if flat {
        Levels {
            values: Vec::new(),
            step: f64::NAN,
            decimals: 2,
        }
    } else {
        nice_levels_at_least(range.0, range.1, opts.levels, noise_nm.unwrap_or(f64::NAN))
    };
    PageFacts {
        line,
        noise_nm,
        flat,
        levels,
        range,
    }
}

/// Lays out the whole page.
pub fn page(input: &MapInput, opts: &RenderOptions) -> Scene {
    let mut scene = Scene {
        width: WIDTH,
        height: HEIGHT,
        background: BACKGROUND,
        items: Vec::new(),
    };
    let names = [input.layer_name.clone()];
    let summary = Summary::from_rows(&input.rows, &names, input.wafer.usable_radius());
    let mut stats = summary
        .all_layers()
        .get(input.layer)
        .cloned()
        .unwrap_or_else(|| summary.first.clone());
    stats.spec = input
        .spec_nm
        .map(|w| SpecCheck::of(&input.rows, input.layer, w));
    let sites = valid_sites(input);
    let scale = (MAP_SIDE - 2.0 * MAP_MARGIN) / input.wafer.diameter_mm;
    let origin = (MAP_LEFT + MAP_SIDE / 2.0, MAP_TOP + MAP_SIDE / 2.0);
    let to_px = |x: f64, y: f64| (origin.0 + x * scale, origin.1 - y * scale);

    let positions: Vec<(f64, f64)> = input.rows.iter().map(|r| (r.x_mm, r.y_mm)).collect();
    let spans = site_line(&positions, 2.0 * input.wafer.usable_radius()).is_none();
    // A field only where the sites span the wafer; two cells of padding so the bands run
    // under the clip edge instead of stopping short.
    let field = if spans {
        Field::new(&sites, &input.wafer)
    } else {
        None
    };
    let n = opts.grid.max(16);
    let pad = 2.0 * 2.0 * input.wafer.usable_radius() / (n - 1) as f64;
    let grid = field.as_ref().map(|f| f.grid(n, pad));
    let facts = page_facts(input, opts, grid.as_ref());
    let (lo, hi) = facts.range;
    let colours = if facts.flat {
        vec![colour::scale(0.5)]
    } else {
        band_colours(lo, hi, &facts.levels.values)
    };

    header(&mut scene, input, &stats);
    figure_strip(&mut scene, input, &stats, &facts);
    let grid = if facts.line.is_some() { None } else { grid };
    wafer_and_field(
        &mut scene,
        input,
        grid.as_ref(),
        &facts.levels,
        &colours,
        (lo, hi),
        origin,
        scale,
    );
    match &facts.line {
        Some(line) => line_markers(&mut scene, input, opts, line, &facts, &to_px),
        None => markers(
            &mut scene,
            input,
            opts,
            &facts.levels,
            &colours,
            &to_px,
            lo,
            hi,
        ),
    }
    if let Some(spec) = &stats.spec {
        spec_rings(&mut scene, input, spec, &to_px);
    }
    if sites.is_empty() {
        // A scale with nothing on it would suggest values that were never measured.
        scene.text(
            origin.0,
            origin.1,
            "No valid site: no colours, no colour key (the excluded sites are listed at left)",
            13.0,
            Anchor::Middle,
            EXCLUDED,
            "no-valid-site",
        );
    } else if facts.flat {
        // A short notice on the wafer; the column's notes give the figures.
        let text = "Flat within noise: no isolines";
        let w = scene::text_width(text, 13.0) + 16.0;
        scene.items.push(Item::Rect {
            x: origin.0 - w / 2.0,
            y: origin.1 - 36.0,
            w,
            h: 22.0,
            fill: Some(Rgb(0xff, 0xff, 0xff)),
            stroke: Some(Stroke::solid(INK, 0.8)),
        });
        scene.text(
            origin.0,
            origin.1 - 20.5,
            text,
            13.0,
            Anchor::Middle,
            INK,
            "flat-within-noise",
        );
    } else {
        colour_bar(&mut scene, input, &facts.levels, &colours, (lo, hi), &sites);
    }
    profile_column(&mut scene, input, &stats, &sites, &facts);
    footer(&mut scene, input, &facts, stats.spec.as_ref());
    scene
}

/// The colour range: given, or the span of the sites and the interpolated grid.
fn value_range(opts: &RenderOptions, sites: &[(f64, f64, f64)], grid: Option<&Grid>) -> (f64, f64) {
    if let Some(r) = opts
        .range
        .filter(|r| r.lo.is_finite() && r.hi.is_finite() && r.hi > r.lo)
    {
        return (r.lo, r.hi);
    }
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for s in sites {
        lo = lo.min(s.2);
        hi = hi.max(s.2);
    }
    if let Some((a, b)) = grid.and_then(Grid::min_max) {
        lo = lo.min(a);
        hi = hi.max(b);
    }
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    (lo, hi)
}

/// A colour per band: the scale at the band's middle value.
fn band_colours(lo: f64, hi: f64, bounds: &[f64]) -> Vec<Rgb> {
    let span = hi - lo;
    if span.is_nan() || span <= 0.0 {
        return vec![colour::scale(0.5)];
    }
    let mut edges = vec![lo];
    edges.extend_from_slice(bounds);
    edges.push(hi);
    edges
        .windows(2)
        .map(|w| colour::scale((0.5 * (w[0] + w[1]) - lo) / span))
        .collect()
}

/// The colour of the band holding `v` on this page.
fn band_colour_of(v: f64, facts: &PageFacts) -> Rgb {
    if facts.flat {
        return colour::scale(0.5);
    }
    let (lo, hi) = facts.range;
    let colours = band_colours(lo, hi, &facts.levels.values);
    colours[facts
        .levels
        .values
        .partition_point(|&b| b <= v)
        .min(colours.len() - 1)]
}

fn fmt(v: f64, decimals: usize) -> String {
    if v.is_finite() {
        format!("{v:.decimals$}")
    } else {
        "—".into()
    }
}

/// Decimals for printing values of this spread: about three significant digits of σ.
fn value_decimals(spread: f64) -> usize {
    if spread.is_nan() || spread <= 0.0 {
        return 2;
    }
    (2.0 - spread.log10().floor()).clamp(0.0, 3.0) as usize
}

fn header(scene: &mut Scene, input: &MapInput, stats: &LayerSummary) {
    let mut title = Vec::new();
    if !input.recipe.is_empty() {
        title.push(input.recipe.clone());
    }
    if !input.wafer_id.is_empty() {
        title.push(format!("wafer {}", input.wafer_id));
    }
    if title.is_empty() {
        title.push("Uniformity map".into());
    }
    scene.items.push(Item::Text {
        x: 28.0,
        y: 40.0,
        text: title.join("  ·  "),
        size: 22.0,
        anchor: Anchor::Start,
        bold: true,
        colour: INK,
        vertical: false,
        class: "title",
    });
    let mut sub = vec![format!(
        "{}{} ({})",
        if input.layer_name.is_empty() {
            String::new()
        } else {
            format!("{} ", input.layer_name)
        },
        input.quantity,
        input.unit
    )];
    if !input.time.is_empty() {
        sub.push(readable_time(&input.time));
    }
    if !input.lot.is_empty() {
        sub.push(format!("lot {}", input.lot));
    }
    if !input.operator.is_empty() {
        sub.push(format!("operator {}", input.operator));
    }
    sub.push(format!(
        "{} of {} sites valid",
        stats.sites_valid, stats.sites_total
    ));
    scene.text(
        28.0,
        64.0,
        sub.join("  ·  "),
        13.0,
        Anchor::Start,
        MUTED,
        "subtitle",
    );
    scene.line(
        vec![(24.0, 76.0), (WIDTH - 24.0, 76.0)],
        Stroke::solid(RULE, 1.0),
        "rule",
    );
}

/// An RFC 3339 time as `2026-12-03 14:22 +01:00`; anything else is shown as given.
pub fn readable_time(t: &str) -> String {
    chrono::DateTime::parse_from_rfc3339(t)
        .map(|d| d.format("%Y-%m-%d %H:%M %:z").to_string())
        .unwrap_or_else(|_| t.to_string())
}

fn footer(scene: &mut Scene, input: &MapInput, facts: &PageFacts, spec: Option<&SpecCheck>) {
    let w = &input.wafer;
    let mut parts = vec![format!(
        "⌀ {} mm, edge exclusion {} mm",
        w.diameter_mm, w.edge_exclusion_mm
    )];
    let levels = &facts.levels;
    if facts.line.is_none() && levels.step.is_finite() && !levels.values.is_empty() {
        parts.push(format!(
            "isolines every {} {}",
            fmt(levels.step, levels.decimals),
            input.unit
        ));
    }
    if let Some(n) = facts.noise_nm {
        parts.push(format!(
            "site σ {} {} (median)",
            fmt(n, value_decimals(n)),
            input.unit
        ));
    }
    parts.push("x right, y up, film side".into());
    parts.push("× excluded".into());
    if spec.is_some() {
        parts.push("ringed: out of spec".into());
    }
    scene.text(
        28.0,
        HEIGHT - 12.0,
        parts.join("  ·  "),
        11.0,
        Anchor::Start,
        MUTED,
        "legend",
    );
}

/// `items` after `lead`, separated by commas, wrapped into lines of at most `max_chars`
/// characters and at most `max_lines` lines; what does not fit is counted as "and N more".
/// Never splits an item (one longer than a line is cut with an ellipsis).
pub fn wrap_list(lead: &str, items: &[String], max_chars: usize, max_lines: usize) -> Vec<String> {
    let pieces: Vec<String> = items
        .iter()
        .enumerate()
        .map(|(k, item)| {
            let sep = if k + 1 < items.len() { "," } else { "" };
            format!("{item}{sep}")
        })
        .collect();
    wrap_pieces(lead, &pieces, max_chars, max_lines)
}

/// A sentence wrapped at spaces into at most `max_lines` lines of `max_chars` characters; a
/// sentence cut short ends in an ellipsis.
pub fn wrap_words(text: &str, max_chars: usize, max_lines: usize) -> Vec<String> {
    let mut lines: Vec<String> = Vec::new();
    for word in text.split_whitespace() {
        let fits = lines
            .last()
            .is_some_and(|l: &String| l.chars().count() + 1 + word.chars().count() <= max_chars);
        if fits {
            let last = lines.last_mut().expect("a line");
            last.push(' ');
            last.push_str(word);
        } else if lines.len() == max_lines.max(1) {
            let last = lines.last_mut().expect("a line");
            *last = clip_chars(&format!("{last}…"), max_chars);
            return lines;
        } else {
            lines.push(clip_chars(word, max_chars));
        }
    }
    lines
}

/// Space-separated `pieces` after `lead` in lines of at most `max_chars`, at most `max_lines`
/// lines, the rest counted as "and N more" (whole pieces are dropped to make room for it).
fn wrap_pieces(lead: &str, pieces: &[String], max_chars: usize, max_lines: usize) -> Vec<String> {
    let max_lines = max_lines.max(1);
    let width = |line: &[String]| {
        line.iter().map(|p| p.chars().count()).sum::<usize>() + line.len().saturating_sub(1)
    };
    let mut lines: Vec<Vec<String>> = vec![if lead.is_empty() {
        vec![]
    } else {
        vec![lead.to_string()]
    }];
    let mut placed = 0;
    for piece in pieces {
        let piece = clip_chars(piece, max_chars);
        let last = lines.last_mut().expect("a line");
        if last.is_empty() || width(last) + 1 + piece.chars().count() <= max_chars {
            last.push(piece);
        } else if lines.len() < max_lines {
            lines.push(vec![piece]);
        } else {
            break;
        }
        placed += 1;
    }
    let mut more = pieces.len() - placed;
    if more > 0 {
        let lead_pieces = usize::from(!lead.is_empty() && lines.len() == 1);
        let last = lines.last_mut().expect("a line");
        while width(last) + format!(" and {more} more").chars().count() > max_chars
            && last.len() > lead_pieces
        {
            last.pop();
            more += 1;
        }
        // The last named item keeps its comma: "…, 12 (low-signal), and 23 more".
        last.push(format!("and {more} more"));
    }
    lines.into_iter().map(|l| l.join(" ")).collect()
}

/// `text` cut to `n` characters with an ellipsis.
pub fn clip_chars(text: &str, n: usize) -> String {
    if text.chars().count() <= n {
        return text.to_string();
    }
    let mut s: String = text.chars().take(n.saturating_sub(1)).collect();
    s.push('…');
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wrapped_lists_keep_items_whole_and_count_the_rest() {
        let items: Vec<String> = (1..=40)
            .map(|k| format!("{k} (residual-structure;at-bound)"))
            .collect();
        let lines = wrap_list("Excluded 40:", &items, 48, 4);
        assert_eq!(lines.len(), 4);
        assert!(lines.iter().all(|l| l.chars().count() <= 48), "{lines:?}");
        let all = lines.join(" ");
        let named = all.matches(" (residual-structure;at-bound)").count();
        let more: usize = all
            .rsplit(" and ")
            .next()
            .and_then(|t| t.split_whitespace().next())
            .and_then(|n| n.parse().ok())
            .expect("a count of the rest");
        assert_eq!(named + more, 40, "{all}");
        // No item is split: every site number is followed by its flag; the only other
        // number is the count.
        let numbers = all
            .split_whitespace()
            .filter(|w| w.parse::<usize>().is_ok())
            .count();
        assert_eq!(numbers, named + 1, "{all}");
        // A short list is all named, with no count.
        assert_eq!(
            wrap_list("Out of spec 2: site", &["4".into(), "9".into()], 48, 3),
            vec!["Out of spec 2: site 4, 9".to_string()]
        );
        assert_eq!(
            wrap_words("one two three four", 9, 2),
            vec!["one two", "three…"]
        );
    }
}
