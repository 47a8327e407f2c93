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
    rows[5].flag = "low_signal".into();
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
    assert!(svg.contains(">Mean</text>"));
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
        assert_eq!(pixel(2, 2), (0xf7, 0xf6, 0xf2));
        let c = pixel((344.0 * scale) as u32, (404.0 * scale + 3.0) as u32);
        assert_ne!(c, (0xf7, 0xf6, 0xf2));
        assert_ne!(c, (0xdc, 0xdf, 0xe2));
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
    rows[30].flag = "low_signal".into();
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
