//! `write_run_outputs`: the derived files of a run folder, here for a two-layer stack
//! measured along one diameter (collinear sites, the hardest case for the interpolation).

mod map_common;

use isopach::map::{sites_table, write_run_outputs, SiteRow, Summary};
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
                row.flag = "poor_fit".into();
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
    // Collinear sites still give a filled map: bands are drawn.
    assert!(svg2.contains(r#"class="band""#));
}
