//! The colour key beside the wafer: one block per band with the level values, and beside
//! each block a bar counting the valid sites whose value lies in that band, so the key is
//! also the histogram of the sites.

use super::{fmt, INK, MAP_LEFT, MAP_SIDE, MAP_TOP, MUTED};
use crate::map::colour::Rgb;
use crate::map::levels::Levels;
use crate::map::render::MapInput;
use crate::map::scene::{Anchor, Item, Scene, Stroke};

/// Draws the key for `colours` between `levels` over `(lo, hi)`, counting `sites`.
pub(super) fn colour_bar(
    scene: &mut Scene,
    input: &MapInput,
    levels: &Levels,
    colours: &[Rgb],
    (lo, hi): (f64, f64),
    sites: &[(f64, f64, f64)],
) {
    let right = MAP_LEFT + MAP_SIDE;
    let (count_left, x, top, bottom, w) = (
        right - 8.0,
        right + 34.0,
        MAP_TOP + 40.0,
        MAP_TOP + MAP_SIDE - 40.0,
        18.0,
    );
    scene.text(
        x + w,
        top - 12.0,
        input.unit.clone(),
        12.0,
        Anchor::End,
        INK,
        "colour-bar-unit",
    );
    scene.text(
        count_left,
        top - 12.0,
        "sites",
        10.0,
        Anchor::Start,
        MUTED,
        "colour-bar-count-title",
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
    let mut counts = vec![0usize; colours.len()];
    for s in sites {
        let k = levels
            .values
            .partition_point(|&b| b <= s.2)
            .min(counts.len() - 1);
        counts[k] += 1;
    }
    let most = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
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
        if counts[k] > 0 && y0 - y1 >= 3.0 {
            // The count bar grows left from the key, 26 px for the fullest band.
            let len = 26.0 * counts[k] as f64 / most;
            let h = (y0 - y1 - 2.0).clamp(1.0, 10.0);
            let mid = 0.5 * (y0 + y1);
            scene.items.push(Item::Rect {
                x: x - 4.0 - len,
                y: mid - h / 2.0,
                w: len,
                h,
                fill: Some(colours[k]),
                stroke: Some(Stroke::solid(INK, 0.5)),
            });
            if y0 - y1 >= 10.0 {
                scene.text(
                    x - 6.0 - len,
                    mid + 3.5,
                    counts[k].to_string(),
                    9.0,
                    Anchor::End,
                    MUTED,
                    "colour-bar-count",
                );
            }
        }
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
