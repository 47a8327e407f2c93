//! Map rendering: the SVG is well-formed and carries the outline, one marker per site and the
//! statistics; the PNG decodes at the expected size; the documentation example.

mod map_common;

use isopach::map::{render_png, render_svg, RenderOptions, ValueRange};
use isopach::run::outputs::run_map_input;
use map_common::*;

/// A small XML well-formedness check: every tag closes in order, attributes are quoted,
/// entities are known. Returns the start tags with their attributes.
fn parse_xml(text: &str) -> Vec<(String, Vec<(String, String)>)> {
    let mut stack: Vec<String> = Vec::new();
    let mut tags = Vec::new();
    let mut rest = text;
    while let Some(lt) = rest.find('<') {
        let body = &rest[..lt];
        check_entities(body);
        let gt = rest[lt..].find('>').expect("unclosed <") + lt;
        let inner = &rest[lt + 1..gt];
        rest = &rest[gt + 1..];
        if let Some(name) = inner.strip_prefix('/') {
            assert_eq!(
                stack.pop().as_deref(),
                Some(name.trim()),
                "mismatched </{name}>"
            );
            continue;
        }
        let self_closing = inner.ends_with('/');
        let inner = inner.trim_end_matches('/');
        let name_end = inner.find(char::is_whitespace).unwrap_or(inner.len());
        let name = inner[..name_end].to_string();
        let mut attrs = Vec::new();
        let mut a = inner[name_end..].trim();
        while !a.is_empty() {
            let eq = a.find('=').expect("attribute without =");
            let key = a[..eq].trim().to_string();
            let after = &a[eq + 1..];
            assert!(after.starts_with('"'), "unquoted attribute {key}");
            let close = after[1..].find('"').expect("unterminated attribute") + 1;
            let value = after[1..close].to_string();
            check_entities(&value);
            attrs.push((key, value));
            a = after[close + 1..].trim();
        }
        if !self_closing {
            stack.push(name.clone());
        }
        tags.push((name, attrs));
    }
    assert!(stack.is_empty(), "unclosed elements {stack:?}");
    tags
}

fn check_entities(s: &str) {
    for (i, _) in s.match_indices('&') {
        let ent = &s[i..s[i..].find(';').map(|e| i + e + 1).unwrap_or(s.len())];
        assert!(
            ["&amp;", "&lt;", "&gt;", "&quot;"].contains(&ent),
            "bad entity {ent}"
        );
    }
}

fn attr<'a>(tag: &'a (String, Vec<(String, String)>), key: &str) -> Option<&'a str> {
    tag.1
        .iter()
        .find(|(k, _)| k == key)
        .map(|(_, v)| v.as_str())
}

#[test]
fn svg_has_outline_one_marker_per_site_and_statistics() {
    let loaded = recipe("oxide-150-49");
    let mut rows = analytic_rows(&loaded);
    rows[5].flag = "low-signal".into();
    let meta = run_toml(&loaded, "W07");
    let input = run_map_input(&rows, &meta, 0);
    let svg = render_svg(&input, &RenderOptions::default());
    let tags = parse_xml(&svg);
    assert_eq!(tags[0].0, "svg");
    let classes: Vec<&str> = tags.iter().filter_map(|t| attr(t, "class")).collect();
    assert_eq!(classes.iter().filter(|c| **c == "outline").count(), 1);
    assert_eq!(
        classes.iter().filter(|c| **c == "edge-exclusion").count(),
        2
    );
    let markers: Vec<_> = tags
        .iter()
        .filter(|t| attr(t, "class").is_some_and(|c| c.split(' ').next() == Some("site")))
        .collect();
    assert_eq!(markers.len(), rows.len());
    let mut numbers: Vec<usize> = markers
        .iter()
        .map(|t| attr(t, "data-site").unwrap().parse().unwrap())
        .collect();
    numbers.sort();
    assert_eq!(numbers, (1..=49).collect::<Vec<_>>());
    assert_eq!(
        markers
            .iter()
            .filter(|t| attr(t, "class") == Some("site excluded"))
            .count(),
        1
    );
    assert!(classes.contains(&"isoline") && classes.contains(&"band"));
    // The statistics text: mean of the 48 valid sites, computed here.
    let valid: Vec<f64> = rows
        .iter()
        .filter(|r| r.flag.is_empty())
        .map(|r| r.thickness_nm[0])
        .collect();
    let mean = valid.iter().sum::<f64>() / valid.len() as f64;
    assert!(svg.contains(">mean</text>"));
    assert!(
        svg.contains(&format!("{mean:.2} nm")),
        "mean {mean:.2} not in the SVG"
    );
    assert!(svg.contains("48 of 49"));
    assert!(svg.contains("oxide-150-49") && svg.contains("wafer W07"));
    assert!(svg.contains("2026-12-03 14:22"));
    // Values are printed by default (one per site) and not with values off.
    assert_eq!(classes.iter().filter(|c| **c == "value").count(), 49);
    let off = RenderOptions {
        values: false,
        ..RenderOptions::default()
    };
    assert!(!render_svg(&input, &off).contains(r#"class="value""#));
}

#[test]
fn svg_isolines_follow_the_requested_levels_and_a_given_range() {
    let loaded = recipe("oxide-150-49");
    let rows = analytic_rows(&loaded);
    let input = run_map_input(&rows, &run_toml(&loaded, "W01"), 0);
    let opts = RenderOptions {
        levels: 4,
        range: Some(ValueRange {
            lo: 990.0,
            hi: 1030.0,
        }),
        ..RenderOptions::default()
    };
    let svg = render_svg(&input, &opts);
    // 990..1030 with about 4 levels: step 10 → ticks 1000, 1010, 1020 on the colour bar.
    for tick in ["1000", "1010", "1020"] {
        assert!(svg.contains(&format!(">{tick}</text>")), "tick {tick}");
    }
    assert!(svg.contains("isolines every 10 nm"));
}

#[test]
fn png_decodes_at_the_expected_size_with_the_map_drawn() {
    let loaded = recipe("resist-100-grid");
    let rows = analytic_rows(&loaded);
    let input = run_map_input(&rows, &run_toml(&loaded, "R3"), 0);
    for (scale, w, h) in [(1.0, 1200, 780), (0.5, 600, 390)] {
        let opts = RenderOptions {
            png_scale: scale,
            ..RenderOptions::default()
        };
        let bytes = render_png(&input, &opts).unwrap();
        let decoder = png::Decoder::new(std::io::Cursor::new(bytes));
        let mut reader = decoder.read_info().unwrap();
        let mut buf = vec![0; reader.output_buffer_size()];
        let info = reader.next_frame(&mut buf).unwrap();
        assert_eq!((info.width, info.height), (w, h));
        assert_eq!(info.color_type, png::ColorType::Rgb);
        let pixel = |x: u32, y: u32| {
            let o = ((y * info.width + x) * 3) as usize;
            (buf[o], buf[o + 1], buf[o + 2])
        };
        // Corner = page background; wafer centre (map square centre) = a scale colour, not
        // the background or the rim grey.
        assert_eq!(pixel(2, 2), (0xfb, 0xfa, 0xf7));
        let c = pixel((720.0 * scale) as u32, (452.0 * scale) as u32);
        assert_ne!(c, (0xfb, 0xfa, 0xf7));
        assert_ne!(c, (0xe2, 0xe0, 0xdb));
        // Text was drawn: the title row holds dark pixels.
        let dark = (0..(600.0 * scale) as u32)
            .filter(|&x| {
                let p = pixel(x, (34.0 * scale) as u32);
                (p.0 as u32 + p.1 as u32 + p.2 as u32) < 200
            })
            .count();
        assert!(dark > 20, "title text missing ({dark} dark pixels)");
    }
}

#[test]
#[ignore = "writes docs/example-map.png; run by hand after changing the look"]
fn write_docs_example() {
    let loaded = recipe("oxide-150-49");
    let mut rows = analytic_rows(&loaded);
    rows[30].flag = "low-signal".into();
    let meta = run_toml(&loaded, "W07");
    let input = run_map_input(&rows, &meta, 0);
    let png = render_png(&input, &RenderOptions::default()).unwrap();
    let docs = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("docs");
    std::fs::create_dir_all(&docs).unwrap();
    std::fs::write(docs.join("example-map.png"), png).unwrap();
}

#[test]
#[ignore = "writes example maps of every repository recipe to target/map-examples for a look"]
fn write_recipe_examples() {
    let out = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target/map-examples");
    std::fs::create_dir_all(&out).unwrap();
    for name in ["oxide-150-49", "resist-100-grid", "stack-200-diameter"] {
        let loaded = recipe(name);
        let rows = analytic_rows(&loaded);
        let input = run_map_input(&rows, &run_toml(&loaded, "X1"), 0);
        let png = render_png(&input, &RenderOptions::default()).unwrap();
        std::fs::write(out.join(format!("{name}.png")), png).unwrap();
    }
}

/// Issue 14, "pages that do not mislead": a run with no valid site draws no colour bar (a
/// scale would suggest values never measured) and says why on the map; site numbers can be
/// shown so a site named in a list can be found.
#[test]
fn no_valid_site_draws_no_colour_bar_and_says_why() {
    let loaded = recipe("oxide-150-49");
    let mut rows = analytic_rows(&loaded);
    for r in &mut rows {
        r.flag = "low-signal".into();
    }
    let meta = run_toml(&loaded, "W00");
    let svg = render_svg(&run_map_input(&rows, &meta, 0), &RenderOptions::default());
    assert!(!svg.contains(r#"class="colour-bar-unit""#));
    assert!(svg.contains(r#"class="no-valid-site""#) && svg.contains("No valid site"));
    // With valid sites the bar is there and the sentence is not.
    let svg = render_svg(
        &run_map_input(&analytic_rows(&loaded), &meta, 0),
        &RenderOptions::default(),
    );
    assert!(svg.contains(r#"class="colour-bar-unit""#) && !svg.contains("no-valid-site"));
}

#[test]
fn site_numbers_can_be_shown_once_per_site() {
    let loaded = recipe("oxide-150-49");
    let mut rows = analytic_rows(&loaded);
    rows[34].flag = "poor-fit".into();
    let meta = run_toml(&loaded, "W07");
    let input = run_map_input(&rows, &meta, 0);
    assert!(!render_svg(&input, &RenderOptions::default()).contains("site-number"));
    let opts = RenderOptions {
        numbers: true,
        ..RenderOptions::default()
    };
    let tags = parse_xml(&render_svg(&input, &opts));
    let n = tags
        .iter()
        .filter(|t| attr(t, "class") == Some("site-number"))
        .count();
    assert_eq!(n, 49, "one number per site, the excluded site 35 included");
}

// ---- Issue 14, item 4: pages that do not mislead -------------------------------------------

use isopach::map::colour::ink_on;
use isopach::map::layout::{page, page_facts, report_page, wrap_list, ReportInput};
use isopach::map::scene::{text_width, Anchor, Item, Scene};
use isopach::map::stats::Summary;

/// The texts of a scene with a given class: (x, y, text, size, anchor, colour).
fn texts<'a>(
    scene: &'a Scene,
    class: &str,
) -> Vec<(f64, f64, &'a str, f64, Anchor, isopach::map::colour::Rgb)> {
    scene
        .items
        .iter()
        .filter_map(|i| match i {
            Item::Text {
                x,
                y,
                text,
                size,
                anchor,
                colour,
                class: c,
                ..
            } if *c == class => Some((*x, *y, text.as_str(), *size, *anchor, *colour)),
            _ => None,
        })
        .collect()
}

fn count_class(svg: &str, class: &str) -> usize {
    svg.matches(&format!(r#"class="{class}""#)).count()
}

#[test]
fn sites_along_one_diameter_are_drawn_as_a_profile_not_a_map() {
    let loaded = recipe("stack-200-diameter");
    let meta = run_toml(&loaded, "N12");
    let input = run_map_input(&analytic_rows(&loaded), &meta, 0);
    let facts = page_facts(&input, &RenderOptions::default(), None);
    assert!(facts.line.is_some(), "17 sites on the y axis are a line");
    let svg = render_svg(&input, &RenderOptions::default());
    assert_eq!(
        count_class(&svg, "isoline"),
        0,
        "no isolines between line sites"
    );
    assert!(
        !svg.contains(r#"class="field""#),
        "no filled field beside the line"
    );
    assert!(count_class(&svg, "line-profile") == 1 && svg.contains("position along y (mm)"));
    assert!(svg.contains(r#"class="line-pattern""#));
    // Every site keeps its marker on the wafer (a coloured dot).
    assert_eq!(count_class(&svg, "site"), 17);

    // A band of sites that does not span the wafer: the 150 mm oxide pattern's sites within
    // 10 mm of the x axis (a 20 mm band on a 140 mm usable disc).
    let oxide = recipe("oxide-150-49");
    let band: Vec<_> = analytic_rows(&oxide)
        .into_iter()
        .filter(|r| r.y_mm.abs() <= 10.0)
        .collect();
    let meta = run_toml(&oxide, "B1");
    let svg = render_svg(&run_map_input(&band, &meta, 0), &RenderOptions::default());
    assert!(svg.contains("position along x (mm)") && count_class(&svg, "isoline") == 0);
    // The full pattern spans the wafer: a map, no line profile.
    let svg = render_svg(
        &run_map_input(&analytic_rows(&oxide), &meta, 0),
        &RenderOptions::default(),
    );
    assert!(count_class(&svg, "isoline") > 0 && count_class(&svg, "line-profile") == 0);
}

#[test]
fn isoline_spacing_is_never_finer_than_the_site_noise() {
    let loaded = recipe("oxide-150-49");
    let meta = run_toml(&loaded, "W07");
    let mut rows = analytic_rows(&loaded);
    // The analytic field spans about 22 nm; ten isolines are 2.5 nm apart. With a site σ of
    // 3 nm the step must be at least 3 nm (the next round step, 5 nm).
    let free = page_facts(
        &run_map_input(&rows, &meta, 0),
        &RenderOptions::default(),
        None,
    );
    assert!(free.levels.step < 3.0, "{:?}", free.levels);
    for r in &mut rows {
        r.sigma_nm = vec![3.0];
    }
    let input = run_map_input(&rows, &meta, 0);
    let facts = page_facts(&input, &RenderOptions::default(), None);
    assert_eq!(facts.noise_nm, Some(3.0));
    assert!(
        facts.levels.step >= 3.0 && !facts.flat,
        "{:?}",
        facts.levels
    );
    let svg = render_svg(&input, &RenderOptions::default());
    assert!(
        svg.contains("isolines every 5 nm"),
        "footer states the step"
    );
}

#[test]
fn a_range_within_noise_says_flat_and_draws_no_structure() {
    // 49 sites spread over 0.06 nm with a fit σ of 0.2 nm: the map must not draw isolines or
    // a colour scale of invented structure.
    let loaded = recipe("oxide-150-49");
    let meta = run_toml(&loaded, "F1");
    let mut rows = analytic_rows(&loaded);
    for (k, r) in rows.iter_mut().enumerate() {
        r.thickness_nm = vec![1000.0 + 0.06 * ((k * 17) % 7) as f64 / 6.0];
        r.sigma_nm = vec![0.2];
    }
    let svg = render_svg(&run_map_input(&rows, &meta, 0), &RenderOptions::default());
    assert!(svg.contains("Flat within noise"), "says why");
    assert_eq!(count_class(&svg, "isoline"), 0);
    assert_eq!(
        count_class(&svg, "radial-fit"),
        0,
        "no fitted curve drawn from noise"
    );
    assert!(!svg.contains(r#"class="colour-bar-unit""#));
    // With the same range but σ of 0.001 nm the spread is real: isolines are drawn.
    for r in &mut rows {
        r.sigma_nm = vec![0.001];
    }
    let svg = render_svg(&run_map_input(&rows, &meta, 0), &RenderOptions::default());
    assert!(!svg.contains("Flat within noise") && count_class(&svg, "isoline") > 0);
}

#[test]
fn long_excluded_and_out_of_spec_lists_stay_inside_their_column() {
    let loaded = recipe("oxide-150-49");
    let meta = run_toml(&loaded, "X9");
    let mut rows = analytic_rows(&loaded);
    for r in rows.iter_mut().skip(4) {
        r.flag = "residual-structure;at-bound".into();
    }
    let mut input = run_map_input(&rows, &meta, 0);
    // A window that leaves the valid sites out.
    input.spec_nm = Some([0.0, 1.0]);
    let scene = page(&input, &RenderOptions::default());
    let column = (24.0, 424.0);
    for class in ["excluded", "out-of-spec"] {
        let lines = texts(&scene, class);
        assert!(!lines.is_empty(), "{class} listed");
        for (x, y, text, size, _, _) in &lines {
            assert!(
                x + text_width(text, *size) <= column.1 + 0.5,
                "{class} line overflows: {text}"
            );
            assert!(*y < 760.0, "{class} line below the page foot: {text}");
        }
    }
    // The excluded list names what fits and counts the rest: 45 sites in all.
    let ex = texts(&scene, "excluded");
    let all: String = ex.iter().map(|t| t.2).collect::<Vec<_>>().join(" ");
    let named = all.matches("(residual-structure;at-bound)").count();
    let more: usize = all
        .split(" and ")
        .nth(1)
        .and_then(|t| t.split_whitespace().next())
        .and_then(|n| n.parse().ok())
        .unwrap_or(0);
    assert!(all.contains(" more"), "{all}");
    assert_eq!(named + more, 45, "{all}");
    // The wrapping itself: every item named once or counted.
    let items: Vec<String> = (1..=30).map(|k| format!("{k} (low-signal)")).collect();
    let lines = wrap_list("Excluded 30:", &items, 40, 3);
    assert_eq!(lines.len(), 3);
    assert!(lines.iter().all(|l| l.chars().count() <= 40), "{lines:?}");
}

#[test]
fn radial_axis_title_does_not_overlap_its_tick_labels() {
    // Values with three decimals give the widest tick labels (e.g. 1000.125).
    let loaded = recipe("oxide-150-49");
    let meta = run_toml(&loaded, "T3");
    let mut rows = analytic_rows(&loaded);
    for r in &mut rows {
        r.thickness_nm = vec![100000.0 + (r.thickness_nm[0] - 1000.0) * 0.01];
        r.sigma_nm = vec![0.0001];
    }
    let scene = page(&run_map_input(&rows, &meta, 0), &RenderOptions::default());
    let title = scene
        .items
        .iter()
        .find_map(|i| match i {
            Item::Text {
                x,
                size,
                vertical: true,
                class: "axis",
                ..
            } => Some(*x + 0.24 * *size),
            _ => None,
        })
        .expect("a vertical axis title");
    let labels: Vec<f64> = texts(&scene, "tick")
        .into_iter()
        .filter(|t| t.4 == Anchor::End && t.0 < 424.0)
        .map(|t| t.0 - text_width(t.2, t.3))
        .collect();
    assert!(labels.len() >= 3, "y tick labels present");
    let nearest = labels.iter().cloned().fold(f64::INFINITY, f64::min);
    assert!(
        title + 2.0 <= nearest,
        "title right edge {title:.1}, labels from {nearest:.1}"
    );
}

#[test]
fn lot_and_operator_appear_and_site_labels_stay_legible_on_the_rim() {
    let loaded = recipe("oxide-150-49");
    let meta = run_toml(&loaded, "W07");
    let input = run_map_input(&analytic_rows(&loaded), &meta, 0);
    let opts = RenderOptions {
        numbers: true,
        ..RenderOptions::default()
    };
    let svg = render_svg(&input, &opts);
    assert!(svg.contains("lot L2612") && svg.contains("operator test"));
    // Every value and number sits on a patch of its own band colour, the ink chosen for it,
    // so the outer ring's labels read over the dashed exclusion line and the grey rim.
    let scene = page(&input, &opts);
    let mut checked = 0;
    for w in scene.items.windows(2) {
        if let (
            Item::Rect {
                x: rx,
                y: ry,
                w: rw,
                h: rh,
                fill: Some(fill),
                ..
            },
            Item::Text {
                x,
                y,
                colour,
                class: "value" | "site-number",
                ..
            },
        ) = (&w[0], &w[1])
        {
            assert!(x > rx && *x < rx + rw && *y > *ry && *y < ry + rh + 0.3 * rh);
            assert_eq!(*colour, ink_on(*fill));
            checked += 1;
        }
    }
    assert_eq!(checked, 2 * 49, "a patch under every value and number");
}

#[test]
fn flag_spellings_are_the_same_in_sites_csv_json_and_on_the_pages() {
    use isopach::fit::quality::ALL_FLAGS;
    let loaded = recipe("oxide-150-49");
    let meta = run_toml(&loaded, "FL");
    let mut rows = analytic_rows(&loaded);
    let mut flags: Vec<String> = ALL_FLAGS.iter().map(|f| f.to_string()).collect();
    flags.push(format!("{};{}", ALL_FLAGS[4], ALL_FLAGS[1]));
    for (r, f) in rows.iter_mut().zip(&flags) {
        r.flag = f.clone();
    }
    // sites.csv, written and read back.
    let csv = isopach::map::sites_table::write(&rows);
    let back = isopach::map::sites_table::read(&csv, std::path::Path::new("sites.csv")).unwrap();
    // summary.json.
    let names = vec!["sio2".to_string()];
    let json = Summary::from_rows(&rows, &names, loaded.wafer().usable_radius()).to_json();
    // The map page and the report page.
    let input = run_map_input(&rows, &meta, 0);
    let map_svg = render_svg(&input, &RenderOptions::default());
    let figures = Summary::from_rows(&rows, &names, loaded.wafer().usable_radius()).first;
    let report = isopach::map::svg::write(&report_page(&ReportInput {
        map: input,
        figures,
        verdict: None,
        facts: vec![],
        attempts: vec![],
        cautions: vec![],
    }));
    for (k, f) in flags.iter().enumerate() {
        assert_eq!(&back[k].flag, f, "sites.csv");
        assert!(
            json.contains(&format!("\"flag\": \"{f}\"")),
            "summary.json lacks {f}"
        );
        assert!(map_svg.contains(&format!("({f})")), "map page lacks {f}");
        assert!(report.contains(&format!(">{f}</text>")), "report lacks {f}");
    }
}
