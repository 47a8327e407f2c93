//! A plot of a measured spectrum against the modelled one (for `isopach fit --plot`), laid
//! out with the map's XY-plot helper ([`crate::map::xy_plot`]) and written as SVG (text as
//! text: no font files needed, the viewer renders the labels).

use super::result::FitResult;
use crate::map::colour::Rgb;
use crate::map::scene::{Anchor, Scene, Stroke};
use crate::map::xy_plot::{padded_range, Axis, PlotStyle, Ticks, XyPlot};

const INK: Rgb = Rgb(0x22, 0x22, 0x22);
const MEASURED: Rgb = Rgb(0x1f, 0x77, 0xb4);
const MODEL: Rgb = Rgb(0xd6, 0x27, 0x28);

/// The plot page: measured (dots) and modelled (line) reflectance over wavelength, with the
/// fitted thicknesses, gof and flags in the title.
pub fn scene(
    wavelength_nm: &[f64],
    measured: &[f64],
    modelled: &[f64],
    result: &FitResult,
) -> Scene {
    let (w, h) = (800.0, 480.0);
    let (lo, hi) = padded_range(measured.iter().chain(modelled).copied(), 0.05, 0.5)
        .map(|(lo, hi)| (lo.max(-0.05), hi))
        .unwrap_or((0.0, 1.0));
    let x0 = wavelength_nm.first().copied().unwrap_or(0.0);
    let x1 = wavelength_nm.last().copied().unwrap_or(1.0).max(x0 + 1.0);
    let mut scene = Scene {
        width: w,
        height: h,
        background: Rgb(0xff, 0xff, 0xff),
        items: Vec::new(),
    };
    let plot = XyPlot {
        left: 70.0,
        top: 50.0,
        right: w - 20.0,
        bottom: h - 50.0,
        x: Axis {
            lo: x0,
            hi: x1,
            title: "wavelength (nm)".into(),
            ticks: Ticks::RoundNoGrid(5),
        },
        y: Axis {
            lo,
            hi,
            title: "reflectance".into(),
            ticks: Ticks::Round(5),
        },
        y_title_x: 16.0,
        style: PlotStyle {
            ink: INK,
            muted: INK,
            grid: Rgb(0xe4, 0xe4, 0xe4),
            frame: Rgb(0x44, 0x44, 0x44),
            fill: None,
            tick_size: 12.0,
            title_size: 12.0,
        },
    };
    let layers: Vec<String> = result
        .layers
        .iter()
        .map(|l| {
            format!(
                "{} {:.2} ± {:.2} nm",
                l.material, l.thickness_nm, l.sigma_nm
            )
        })
        .collect();
    let flags = if result.flags.is_empty() {
        String::new()
    } else {
        format!(" [{}]", result.flags.join(", "))
    };
    scene.text(
        plot.left,
        22.0,
        layers.join(", "),
        14.0,
        Anchor::Start,
        INK,
        "title",
    );
    scene.text(
        plot.left,
        40.0,
        format!("method {}, gof {:.4}{flags}", result.method, result.gof),
        12.0,
        Anchor::Start,
        INK,
        "subtitle",
    );
    plot.axes(&mut scene);
    let pairs = |ys: &[f64]| -> Vec<(f64, f64)> {
        wavelength_nm
            .iter()
            .copied()
            .zip(ys.iter().copied())
            .collect()
    };
    plot.dots(&mut scene, &pairs(measured), 1.3, MEASURED, "measured");
    plot.line(
        &mut scene,
        &pairs(modelled),
        Stroke::solid(MODEL, 1.2),
        "model",
    );
    let key_x = plot.right - 8.0;
    for (k, (text, colour)) in [("● measured", MEASURED), ("— model", MODEL)]
        .into_iter()
        .enumerate()
    {
        let y = plot.top + 16.0 * (k + 1) as f64;
        scene.text(key_x, y, text, 12.0, Anchor::End, colour, "key");
    }
    scene
}

/// The plot as a standalone SVG document.
pub fn svg(
    wavelength_nm: &[f64],
    measured: &[f64],
    modelled: &[f64],
    result: &FitResult,
) -> String {
    crate::map::svg::write(&scene(wavelength_nm, measured, modelled, result))
}
