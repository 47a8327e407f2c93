//! `run::outputs::write_run_outputs`: the derived files of a run folder, here for a two-layer stack
//! measured along one diameter (collinear sites, the hardest case for the interpolation).

mod map_common;

use isopach::map::{sites_table, SiteRow, Summary};
use isopach::run::outputs::write_run_outputs;
use map_common::*;

#[test]
fn two_layer_run_gets_all_files_and_a_layers_array() {
    let dir = tempfile::tempdir().unwrap();
    let loaded = recipe("stack-200-diameter");
    let meta = run_toml(&loaded, "N12");
    let r_u = loaded.wafer().usable_radius();
    let rows: Vec<SiteRow> = loaded
        .sites()
        .iter()
        .map(|s| {
            let t = analytic(s.x_mm, s.y_mm, r_u);
            let mut row = site_row(s, vec![150.0 + 0.1 * (t - 1000.0), t / 2.0]);
            if s.number == 3 {
                row.flag = "poor-fit".into();
            }
            row
        })
        .collect();
    let folder = isopach::run::folder::RunFolder::new(dir.path());
    std::fs::write(folder.run_toml(), toml::to_string(&meta).unwrap()).unwrap();
    let summary = write_run_outputs(&folder, &rows, &meta).unwrap();
    assert_eq!(summary.layers.len(), 2);
    assert_eq!(summary.first.layer, "si3n4");
    assert_eq!(summary.layers[1].layer, "sio2");
    assert_eq!(summary.first.sites_valid, 16);
    let back = sites_table::read_file(&folder.sites_csv()).unwrap();
    assert_eq!(back.len(), 17);
    assert_eq!(back[0].thickness_nm.len(), 2);
    let json: Summary =
        serde_json::from_str(&std::fs::read_to_string(folder.summary_json()).unwrap()).unwrap();
    assert_eq!(json.layers[1].sites_valid, 16);
    for name in ["map.svg", "map.png", "map-layer2.svg", "map-layer2.png"] {
        assert!(dir.path().join(name).is_file(), "{name} missing");
    }
    let svg2 = std::fs::read_to_string(dir.path().join("map-layer2.svg")).unwrap();
    assert!(svg2.contains("sio2 thickness"));
    // Sites along one diameter give a profile along the line, not a map invented between
    // them (issue 14, "pages that do not mislead").
    assert!(!svg2.contains(r#"class="band""#));
    assert!(svg2.contains(r#"class="line-profile""#));
}

/// A recipe with a specification window: the valid sites outside it are listed in
/// `summary.json`, ringed on the map and named in its statistics panel; flagged sites are
/// not counted either way.
#[test]
fn out_of_spec_sites_are_listed_and_ringed() {
    let dir = tempfile::tempdir().unwrap();
    let loaded = recipe("oxide-150-49");
    let mut meta = run_toml(&loaded, "S7");
    let mut rows = analytic_rows(&loaded);
    // The analytic field spans about 994–1020 nm; a window of 1000–1015 leaves the edge ring
    // and the thickest centre sites out.
    meta.recipe.accept.spec_nm = Some([1000.0, 1015.0]);
    rows[0].flag = "poor-fit".into();
    let expected_out: Vec<usize> = rows
        .iter()
        .filter(|r| r.is_valid() && !(1000.0..=1015.0).contains(&r.thickness_nm[0]))
        .map(|r| r.site)
        .collect();
    assert!(
        expected_out.len() >= 3 && expected_out.len() < 45,
        "{expected_out:?}"
    );
    let folder = make_run_folder(dir.path(), &meta, &rows);
    let summary = write_run_outputs(&folder, &rows, &meta).unwrap();
    let spec = summary.first.spec.as_ref().expect("spec checked");
    assert_eq!(spec.sites_out, expected_out);
    assert_eq!(spec.sites_in + spec.sites_out.len(), 48);
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(folder.summary_json()).unwrap()).unwrap();
    assert_eq!(json["spec"]["lo_nm"], 1000.0);
    assert_eq!(
        json["spec"]["sites_out"].as_array().unwrap().len(),
        expected_out.len()
    );
    let svg = std::fs::read_to_string(folder.map_svg()).unwrap();
    let doc = roxmltree::Document::parse(&svg).unwrap();
    let rings = doc
        .descendants()
        .filter(|n| n.attribute("class") == Some("out-of-spec") && n.has_tag_name("path"))
        .count();
    assert_eq!(rings, 2 * expected_out.len(), "ring and halo per site");
    assert!(svg.contains(&format!("{} of 48", spec.sites_in)));
    assert!(svg.contains(&format!("Out of spec {}: site", expected_out.len())));
}
