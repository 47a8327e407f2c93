//! The colour bar beside the map: one block per band, level ticks and labels.

use super::{fmt, INK, MAP_LEFT, MAP_SIDE, MAP_TOP};
use crate::map::colour::Rgb;
use crate::map::levels::Levels;
use crate::map::render::MapInput;
use crate::map::scene::{Anchor, Item, Scene, Stroke};

/// Draws the bar for `colours` between `levels` over `(lo, hi)`.
pub(super) fn colour_bar(
    scene: &mut Scene,
    input: &MapInput,
    levels: &Levels,
    colours: &[Rgb],
    (lo, hi): (f64, f64),
) {
    let (x, top, bottom, w) = (
        MAP_LEFT + MAP_SIDE + 14.0,
        MAP_TOP + 48.0,
        MAP_TOP + MAP_SIDE - 40.0,
        20.0,
    );
    scene.text(
        x,
        top - 12.0,
        input.unit.clone(),
        12.0,
        Anchor::Start,
        INK,
        "colour-bar-unit",
    );
    let span = hi - lo;
    let to_y = |v: f64| bottom - (v - lo) / span * (bottom - top);
    let mut edges = vec![lo];
    edges.extend_from_slice(&levels.values);
    edges.push(hi);
    if span.is_nan() || span <= 0.0 {
        scene.items.push(Item::Rect {
            x,
            y: top,
            w,
            h: bottom - top,
            fill: Some(colours[0]),
            stroke: None,
        });
        scene.text(
            x + w + 6.0,
            0.5 * (top + bottom) + 4.0,
            fmt(lo, 2),
            11.0,
            Anchor::Start,
            INK,
            "tick",
        );
        return;
    }
    for (k, win) in edges.windows(2).enumerate() {
        let (y1, y0) = (to_y(win[1]), to_y(win[0]));
        scene.items.push(Item::Rect {
            x,
            y: y1,
            w,
            h: y0 - y1,
            fill: Some(colours[k]),
            stroke: None,
        });
    }
    scene.items.push(Item::Rect {
        x,
        y: top,
        w,
        h: bottom - top,
        fill: None,
        stroke: Some(Stroke::solid(INK, 0.8)),
    });
    // Label every level if they fit (≥ 14 px apart), else every other one.
    let gap = if levels.values.len() > 1 {
        (to_y(levels.values[0]) - to_y(levels.values[1])).abs()
    } else {
        f64::INFINITY
    };
    let every = if gap >= 14.0 {
        1
    } else {
        (14.0 / gap).ceil() as usize
    };
    for (k, &v) in levels.values.iter().enumerate() {
        let y = to_y(v);
        scene.line(
            vec![(x + w, y), (x + w + 4.0, y)],
            Stroke::solid(INK, 0.8),
            "tick",
        );
        if k % every == 0 {
            scene.text(
                x + w + 7.0,
                y + 4.0,
                fmt(v, levels.decimals),
                11.0,
                Anchor::Start,
                INK,
                "tick",
            );
        }
    }
}
