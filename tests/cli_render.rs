//! `isopach render` end to end: the real binary on run folders built by hand in a tempdir.

mod map_common;

use map_common::*;
use std::process::Command;

fn isopach(args: &[&std::ffi::OsStr]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_isopach"))
        .args(args)
        .output()
        .expect("binary runs")
}

#[test]
fn render_writes_map_svg_and_png_into_the_run_folder() {
    let dir = tempfile::tempdir().unwrap();
    let loaded = recipe("oxide-150-49");
    let rows = analytic_rows(&loaded);
    let folder = make_run_folder(&dir.path().join("run1"), &run_toml(&loaded, "W07"), &rows);
    let out = isopach(&["render".as_ref(), folder.root.as_os_str()]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{stderr}");
    let svg = std::fs::read_to_string(folder.map_svg()).unwrap();
    assert!(svg.starts_with("<svg") && svg.contains("wafer W07"));
    let png = std::fs::read(folder.map_png()).unwrap();
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("49 of 49 sites valid"), "{stdout}");
}

#[test]
fn render_site_numbers_puts_every_site_number_on_the_map() {
    let dir = tempfile::tempdir().unwrap();
    let loaded = recipe("oxide-150-49");
    let rows = analytic_rows(&loaded);
    let folder = make_run_folder(&dir.path().join("n"), &run_toml(&loaded, "W07"), &rows);
    let target = dir.path().join("numbers.svg");
    let out = isopach(&[
        "render".as_ref(),
        folder.root.as_os_str(),
        "--out".as_ref(),
        target.as_os_str(),
        "--site-numbers".as_ref(),
        "--no-values".as_ref(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let svg = std::fs::read_to_string(&target).unwrap();
    // Numbers shown even with values off, one per site, site 35 among them.
    assert_eq!(svg.matches(r#"class="site-number""#).count(), 49);
    assert!(svg.contains(r#"class="site-number" "#) && svg.contains(">35</text>"));
    assert!(!svg.contains(r#"class="value""#));
}

#[test]
fn render_out_levels_and_no_values() {
    let dir = tempfile::tempdir().unwrap();
    let loaded = recipe("resist-100-grid");
    let rows = analytic_rows(&loaded);
    let folder = make_run_folder(&dir.path().join("r"), &run_toml(&loaded, "R1"), &rows);
    let target = dir.path().join("custom.svg");
    let out = isopach(&[
        "render".as_ref(),
        folder.root.as_os_str(),
        "--out".as_ref(),
        target.as_os_str(),
        "--levels".as_ref(),
        "3".as_ref(),
        "--no-values".as_ref(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let svg = std::fs::read_to_string(&target).unwrap();
    assert!(!svg.contains(r#"class="value""#));
    assert!(
        !folder.map_svg().exists(),
        "--out writes only the named file"
    );
    let isolines_3 = svg.matches(r#"class="isoline""#).count();
    let default = dir.path().join("default.svg");
    let out = isopach(&[
        "render".as_ref(),
        folder.root.as_os_str(),
        "--out".as_ref(),
        default.as_os_str(),
    ]);
    assert!(out.status.success());
    let isolines_10 = std::fs::read_to_string(&default)
        .unwrap()
        .matches(r#"class="isoline""#)
        .count();
    assert!(isolines_3 < isolines_10, "{isolines_3} vs {isolines_10}");
}

#[test]
fn render_errors_say_what_and_where() {
    let dir = tempfile::tempdir().unwrap();
    let loaded = recipe("oxide-150-49");
    let rows = analytic_rows(&loaded);
    let folder = make_run_folder(&dir.path().join("r"), &run_toml(&loaded, "W1"), &rows);
    let out = isopach(&[
        "render".as_ref(),
        folder.root.as_os_str(),
        "--out".as_ref(),
        "map.pdf".as_ref(),
    ]);
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains(".svg or .png"));
    std::fs::write(
        folder.sites_csv(),
        "site,x_mm,y_mm,thickness_nm\n1,0,zero,5\n",
    )
    .unwrap();
    let out = isopach(&["render".as_ref(), folder.root.as_os_str()]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(!out.status.success());
    assert!(
        stderr.contains("sites.csv:2") && stderr.contains("y_mm"),
        "{stderr}"
    );
    let out = isopach(&["render".as_ref(), dir.path().join("nowhere").as_os_str()]);
    assert!(String::from_utf8_lossy(&out.stderr).contains("run.toml"));
}
