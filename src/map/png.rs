//! PNG output: a [`Scene`] rasterised with plotters' bitmap backend and the embedded DejaVu
//! Sans font (no system fonts needed), then encoded in memory.
//!
//! The page is drawn at twice the asked size and box-filtered down, which anti-aliases the
//! outline, isolines and markers. The colour map is filled pixel by pixel: each pixel inside
//! the usable outline takes the band colour of the bilinearly sampled grid value, so band
//! edges follow the field at sub-node resolution.

use super::colour::Rgb;
use super::scene::{Anchor, FieldFill, Item, Scene, Stroke};
use super::MapError;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use plotters::style::{FontFamily, FontStyle, FontTransform};
use std::sync::Once;

/// Supersampling factor per axis.
const SS: u32 = 2;
/// Family name the embedded faces are registered under.
const FAMILY: &str = "isopach-sans";
/// ab_glyph sizes by ascent − descent, SVG by the em: DejaVu Sans has (1901 + 483)/2048
/// = 1.164 em between them (from the font's hhea table), so this makes both agree.
const EM_TO_AB_GLYPH: f64 = 1.164;

/// Registers the embedded DejaVu Sans faces with plotters, once per process.
fn register_fonts() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        // The bytes are the crate's own embedded TTF files; registration only fails for an
        // unreadable font, which would be a build defect.
        let _ = plotters::style::register_font(FAMILY, FontStyle::Normal, dejavu::sans::regular());
        let _ = plotters::style::register_font(FAMILY, FontStyle::Bold, dejavu::sans::bold());
    });
}

fn rgb(c: Rgb) -> RGBColor {
    RGBColor(c.0, c.1, c.2)
}

/// Rasterises the scene at `scale` output pixels per layout pixel and encodes it as PNG.
pub fn write(scene: &Scene, scale: f64) -> Result<Vec<u8>, MapError> {
    let (w, h, rgb_data) = rasterise(scene, scale)?;
    encode(w, h, &rgb_data)
}

/// The scene as 8-bit RGB pixels: (width, height, data).
pub fn rasterise(scene: &Scene, scale: f64) -> Result<(u32, u32, Vec<u8>), MapError> {
    register_fonts();
    let scale = if scale.is_finite() && scale > 0.0 {
        scale
    } else {
        1.0
    };
    let out_w = (scene.width * scale).round().max(1.0) as u32;
    let out_h = (scene.height * scale).round().max(1.0) as u32;
    let (bw, bh) = (out_w * SS, out_h * SS);
    let k = scale * SS as f64;
    let bg = scene.background;
    let mut buf: Vec<u8> = [bg.0, bg.1, bg.2].repeat((bw * bh) as usize);
    for item in &scene.items {
        if let Item::Field(f) = item {
            fill_field(&mut buf, bw, bh, f, k);
            continue;
        }
        let mut backend = BitMapBackend::with_buffer(&mut buf, (bw, bh));
        draw_item(&mut backend, item, k).map_err(|e| MapError::Png(e.to_string()))?;
        backend
            .present()
            .map_err(|e| MapError::Png(e.to_string()))?;
    }
    Ok((out_w, out_h, downsample(&buf, bw, bh)))
}

fn px(p: (f64, f64), k: f64) -> (i32, i32) {
    ((p.0 * k).round() as i32, (p.1 * k).round() as i32)
}

fn stroke_style(s: &Stroke, k: f64) -> ShapeStyle {
    rgb(s.colour).stroke_width((s.width * k).round().max(1.0) as u32)
}

fn draw_item<DB: DrawingBackend>(
    b: &mut DB,
    item: &Item,
    k: f64,
) -> Result<(), plotters::drawing::DrawingAreaErrorKind<DB::ErrorType>>
where
    DB::ErrorType: 'static,
{
    let wrap = plotters::drawing::DrawingAreaErrorKind::BackendError;
    match item {
        Item::Rect {
            x,
            y,
            w,
            h,
            fill,
            stroke,
        } => {
            let (a, c) = (px((*x, *y), k), px((x + w, y + h), k));
            if let Some(f) = fill {
                b.draw_rect(a, c, &rgb(*f).filled(), true).map_err(wrap)?;
            }
            if let Some(s) = stroke {
                b.draw_rect(a, c, &stroke_style(s, k), false)
                    .map_err(wrap)?;
            }
        }
        Item::Path {
            points,
            closed,
            fill,
            stroke,
            ..
        } => {
            let pts: Vec<(i32, i32)> = points.iter().map(|&p| px(p, k)).collect();
            if let (Some(f), true) = (fill, pts.len() >= 3) {
                b.fill_polygon(pts.clone(), &rgb(*f).filled())
                    .map_err(wrap)?;
            }
            if let Some(s) = stroke {
                let mut line = points.clone();
                if *closed {
                    if let Some(&p0) = points.first() {
                        line.push(p0);
                    }
                }
                let pieces = match s.dash {
                    Some((on, off)) => dashes(&line, on, off),
                    None => vec![line],
                };
                for piece in pieces {
                    let ipts: Vec<(i32, i32)> = piece.iter().map(|&p| px(p, k)).collect();
                    b.draw_path(ipts, &stroke_style(s, k)).map_err(wrap)?;
                }
            }
        }
        Item::Marker {
            x,
            y,
            r,
            excluded,
            colour,
            halo,
            ..
        } => {
            let c = px((*x, *y), k);
            if *excluded {
                let a = r * 1.2;
                let style = rgb(*colour).stroke_width((1.8 * k).round() as u32);
                b.draw_path(vec![px((x - a, y - a), k), px((x + a, y + a), k)], &style)
                    .map_err(wrap)?;
                b.draw_path(vec![px((x - a, y + a), k), px((x + a, y - a), k)], &style)
                    .map_err(wrap)?;
            } else {
                b.draw_circle(
                    c,
                    ((r + 1.0) * k).round() as u32,
                    &rgb(*halo).filled(),
                    true,
                )
                .map_err(wrap)?;
                b.draw_circle(c, (r * k).round() as u32, &rgb(*colour).filled(), true)
                    .map_err(wrap)?;
            }
        }
        Item::Text {
            x,
            y,
            text,
            size,
            anchor,
            bold,
            colour,
            vertical,
            ..
        } => {
            let glyph_px = size * EM_TO_AB_GLYPH * k;
            let style = if *bold {
                FontStyle::Bold
            } else {
                FontStyle::Normal
            };
            let h = match anchor {
                Anchor::Start => HPos::Left,
                Anchor::Middle => HPos::Center,
                Anchor::End => HPos::Right,
            };
            let ink = rgb(*colour);
            let mut ts = TextStyle::from((FontFamily::Name(FAMILY), glyph_px, style).into_font())
                .color(&ink)
                .pos(Pos::new(h, VPos::Top));
            // Plotters puts the baseline half a glyph size below the anchor.
            let (mut ax, mut ay) = (x * k, y * k - glyph_px / 2.0);
            if *vertical {
                ts = ts.transform(FontTransform::Rotate270);
                (ax, ay) = (x * k - glyph_px / 2.0, y * k);
            }
            b.draw_text(text, &ts, (ax.round() as i32, ay.round() as i32))
                .map_err(wrap)?;
        }
        Item::Field(_) => {}
    }
    Ok(())
}

/// Splits a polyline into dashes of length `on` separated by gaps `off` (layout px).
fn dashes(line: &[(f64, f64)], on: f64, off: f64) -> Vec<Vec<(f64, f64)>> {
    let mut out = Vec::new();
    let mut current: Vec<(f64, f64)> = Vec::new();
    let (mut drawing, mut left) = (true, on);
    for w in line.windows(2) {
        let (mut a, b) = (w[0], w[1]);
        let mut seg = (b.0 - a.0).hypot(b.1 - a.1);
        while seg > 0.0 {
            let t = left.min(seg);
            let p = (a.0 + (b.0 - a.0) * t / seg, a.1 + (b.1 - a.1) * t / seg);
            if drawing {
                if current.is_empty() {
                    current.push(a);
                }
                current.push(p);
            }
            seg -= t;
            left -= t;
            a = p;
            if left <= 1e-9 {
                if drawing && current.len() > 1 {
                    out.push(std::mem::take(&mut current));
                }
                current.clear();
                drawing = !drawing;
                left = if drawing { on } else { off };
            }
        }
    }
    if current.len() > 1 {
        out.push(current);
    }
    out
}

/// Fills the banded colour map into the buffer: even-odd scanline spans of the clip polygon,
/// each pixel coloured by its band. The rows are shared among the available cores.
fn fill_field(buf: &mut [u8], bw: u32, bh: u32, f: &FieldFill, k: f64) {
    let clip: Vec<(f64, f64)> = f.clip.iter().map(|&(x, y)| (x * k, y * k)).collect();
    if clip.len() < 3 {
        return;
    }
    let (ymin, ymax) = clip
        .iter()
        .fold((f64::MAX, f64::MIN), |(a, b), p| (a.min(p.1), b.max(p.1)));
    let y_start = ymin.floor().max(0.0) as usize;
    let y_end = (ymax.ceil().max(0.0) as usize).min(bh as usize);
    if y_start >= y_end {
        return;
    }
    let row_bytes = bw as usize * 3;
    let threads = std::thread::available_parallelism()
        .map(|t| t.get())
        .unwrap_or(1)
        .clamp(1, 8);
    let per = (y_end - y_start).div_ceil(threads);
    let rows = &mut buf[y_start * row_bytes..y_end * row_bytes];
    std::thread::scope(|scope| {
        for (band, chunk) in rows.chunks_mut(per * row_bytes).enumerate() {
            let clip = &clip;
            let first = y_start + band * per;
            scope.spawn(move || fill_rows(chunk, first, bw, f, k, clip));
        }
    });
}

/// Fills the field into `rows`, whole pixel rows starting at row `first` of the image.
fn fill_rows(rows: &mut [u8], first: usize, bw: u32, f: &FieldFill, k: f64, clip: &[(f64, f64)]) {
    let mut xs: Vec<f64> = Vec::new();
    for (r, row) in rows.chunks_exact_mut(bw as usize * 3).enumerate() {
        let yc = (first + r) as f64 + 0.5;
        xs.clear();
        for (i, &a) in clip.iter().enumerate() {
            let b = clip[(i + 1) % clip.len()];
            if (a.1 <= yc) != (b.1 <= yc) {
                xs.push(a.0 + (yc - a.1) / (b.1 - a.1) * (b.0 - a.0));
            }
        }
        xs.sort_by(f64::total_cmp);
        for span in xs.chunks_exact(2) {
            let x0 = (span[0] - 0.5).ceil().max(0.0) as u32;
            let x1 = ((span[1] - 0.5).floor() as i64).min(bw as i64 - 1);
            for pxl in x0 as i64..=x1 {
                let (mx, my) = f.to_mm((pxl as f64 + 0.5) / k, yc / k);
                let v = f.grid.bilinear(mx, my);
                if v.is_nan() {
                    continue;
                }
                let c = f.colours[f.band(v).min(f.colours.len() - 1)];
                let o = pxl as usize * 3;
                row[o..o + 3].copy_from_slice(&[c.0, c.1, c.2]);
            }
        }
    }
}

/// Box filter SS × SS → 1.
fn downsample(buf: &[u8], bw: u32, bh: u32) -> Vec<u8> {
    let (w, h) = (bw / SS, bh / SS);
    let mut out = vec![0u8; (w * h * 3) as usize];
    let n = SS * SS;
    for y in 0..h {
        for x in 0..w {
            for c in 0..3 {
                let mut sum = 0u32;
                for dy in 0..SS {
                    for dx in 0..SS {
                        let o = (((y * SS + dy) * bw + x * SS + dx) * 3 + c) as usize;
                        sum += buf[o] as u32;
                    }
                }
                out[((y * w + x) * 3 + c) as usize] = ((sum + n / 2) / n) as u8;
            }
        }
    }
    out
}

/// Encodes 8-bit RGB pixels as PNG: every row Sub-filtered (each byte less the same channel
/// of the pixel to its left, PNG's filter type 1), the zlib stream compressed on the
/// available cores ([`super::zlib_pieces`]) and written as one image-data chunk.
pub fn encode(w: u32, h: u32, data: &[u8]) -> Result<Vec<u8>, MapError> {
    let png_err = |e: &dyn std::fmt::Display| MapError::Png(e.to_string());
    let row = w as usize * 3;
    if data.len() != row * h as usize {
        return Err(png_err(&format!(
            "{} bytes of pixels for a {w} × {h} RGB image",
            data.len()
        )));
    }
    let mut filtered = Vec::with_capacity((row + 1) * h as usize);
    for line in data.chunks_exact(row.max(1)).take(h as usize) {
        filtered.push(1u8);
        filtered.extend_from_slice(&line[..3.min(line.len())]);
        filtered.extend(line.windows(4).map(|p| p[3].wrapping_sub(p[0])));
    }
    let threads = std::thread::available_parallelism().map_or(1, |t| t.get());
    let zlib = super::zlib_pieces::compress(&filtered, threads).map_err(|e| png_err(&e))?;
    let mut out = Vec::with_capacity(zlib.len() + 64);
    {
        let mut enc = ::png::Encoder::new(&mut out, w, h);
        enc.set_color(::png::ColorType::Rgb);
        enc.set_depth(::png::BitDepth::Eight);
        let mut writer = enc.write_header().map_err(|e| png_err(&e))?;
        writer
            .write_chunk(::png::chunk::IDAT, &zlib)
            .map_err(|e| png_err(&e))?;
        writer.finish().map_err(|e| png_err(&e))?;
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn encoded_pixels_decode_with_the_library_decoder() {
        // A gradient with noise, wide enough that the stream is compressed in pieces.
        let (w, h) = (700u32, 500u32);
        let pixels: Vec<u8> = (0..w * h * 3)
            .map(|i| ((i / 3 % w) / 3 + (i / 3 / w) / 2 + (i.wrapping_mul(7919) % 13)) as u8)
            .collect();
        let bytes = encode(w, h, &pixels).unwrap();
        let mut reader = ::png::Decoder::new(&bytes[..]).read_info().unwrap();
        let mut back = vec![0; reader.output_buffer_size()];
        let info = reader.next_frame(&mut back).unwrap();
        assert_eq!((info.width, info.height), (w, h));
        assert_eq!(info.color_type, ::png::ColorType::Rgb);
        assert_eq!(&back[..info.buffer_size()], &pixels[..]);
        assert!(encode(w, h, &pixels[1..]).is_err());
    }

    #[test]
    fn dashes_alternate_on_and_off() {
        let d = dashes(&[(0.0, 0.0), (10.0, 0.0)], 3.0, 2.0);
        assert_eq!(d.len(), 2);
        assert_eq!(d[0], vec![(0.0, 0.0), (3.0, 0.0)]);
        assert_eq!(d[1], vec![(5.0, 0.0), (8.0, 0.0)]);
    }
}
