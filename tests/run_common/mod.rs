//! Shared by the tests that measure maps on the simulated bench.

/// A 9-site oxide recipe with short acquisitions, for quick runs on the simulated bench.
pub const RECIPE: &str = r#"name = "rel-9"
[wafer]
diameter_mm = 150
edge_exclusion_mm = 5
orientation = "flat"
[pattern]
kind = "standard"
sites = 9
[film]
ambient = "air"
substrate = "si"
layers = [ { material = "sio2", nominal_nm = 600, min_nm = 100, max_nm = 2000 } ]
wavelength_nm = [420, 980]
[acquire]
integration_ms = 10
averages = 2
settle_ms = 50
"#;
