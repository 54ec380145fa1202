//! PNG images of energy maps: our own perceptually ordered colour ramp, a
//! colour scale set per image from the scan's threshold and the trigger's
//! peak, and (for `thumbnail`) a self-explaining plate with axes, a colour
//! bar and a caption.
//!
//! Colour ramp ("ember"): a path in CIELAB (CIE 1976, D65 white) with
//! lightness L* rising linearly from 12 to 97 while the hue turns from
//! plum (330°) through crimson, copper and amber to a pale straw (100°),
//! chroma peaking two fifths of the way. Colours outside the sRGB gamut
//! have their chroma reduced (L* and hue kept), so lightness stays linear
//! in the value. Checked by converting every 8-bit colour back to L* (test
//! `lightness_is_monotonic`).
//!
//! Colour scale ([`ColourScale`]): the square root of the normalised
//! energy Z from 0 to the image's top, so the colour follows the tile's
//! amplitude (SNR-like) and a loud glitch keeps its shape instead of
//! saturating. The top is the larger of the image's own peak and the
//! scan's trigger threshold (`Z = 1 + SNR²/2`), rounded up to two
//! significant figures; the threshold is marked on the bar, so a reader
//! sees at once which pixels are above it.

use super::images::ImageExtent;
use anyhow::{bail, Context, Result};
use image::{Rgb, RgbImage};
use std::path::Path;

/// Pixels per map cell in each direction (stored-fingerprint images).
pub const CELL_PX: u32 = 8;

const WHITE: [f64; 3] = [0.950_47, 1.0, 1.088_83]; // D65, Y = 1

fn srgb_encode(c: f64) -> f64 {
    if c <= 0.003_130_8 {
        12.92 * c
    } else {
        1.055 * c.powf(1.0 / 2.4) - 0.055
    }
}

fn srgb_decode(c: f64) -> f64 {
    if c <= 0.040_45 {
        c / 12.92
    } else {
        ((c + 0.055) / 1.055).powf(2.4)
    }
}

/// CIELAB → linear sRGB (may fall outside 0..1).
fn lab_to_linear_rgb(l: f64, a: f64, b: f64) -> [f64; 3] {
    let fy = (l + 16.0) / 116.0;
    let fx = fy + a / 500.0;
    let fz = fy - b / 200.0;
    let finv = |t: f64| {
        if t > 6.0 / 29.0 {
            t * t * t
        } else {
            3.0 * (6.0f64 / 29.0).powi(2) * (t - 4.0 / 29.0)
        }
    };
    let (x, y, z) = (
        WHITE[0] * finv(fx),
        WHITE[1] * finv(fy),
        WHITE[2] * finv(fz),
    );
    [
        3.240_454_2 * x - 1.537_138_5 * y - 0.498_531_4 * z,
        -0.969_266 * x + 1.876_010_8 * y + 0.041_556 * z,
        0.055_643_4 * x - 0.204_025_9 * y + 1.057_225_2 * z,
    ]
}

/// CIE L* of an 8-bit sRGB colour.
pub fn srgb8_lightness(rgb: [u8; 3]) -> f64 {
    let lin: Vec<f64> = rgb.iter().map(|&c| srgb_decode(c as f64 / 255.0)).collect();
    let y = 0.212_672_9 * lin[0] + 0.715_152_2 * lin[1] + 0.072_175 * lin[2];
    if y > (6.0f64 / 29.0).powi(3) {
        116.0 * y.cbrt() - 16.0
    } else {
        y * (29.0f64 / 3.0).powi(3)
    }
}

/// Lightness L* of the ramp's darkest and lightest colours.
const L_RANGE: (f64, f64) = (12.0, 97.0);
/// Hue angle (CIELAB, degrees) of the ramp's darkest and lightest colours;
/// the hue rises through red and orange (360° = 0°).
const HUE_RANGE_DEG: (f64, f64) = (330.0, 460.0);

/// Colour of a value `t` in 0..1 (clamped) on the ember ramp.
pub fn colour(t: f64) -> [u8; 3] {
    let t = t.clamp(0.0, 1.0);
    let l = L_RANGE.0 + (L_RANGE.1 - L_RANGE.0) * t;
    let h = (HUE_RANGE_DEG.0 + (HUE_RANGE_DEG.1 - HUE_RANGE_DEG.0) * t).to_radians();
    // Chroma: 18 at the ends, up to ~88 at t = 0.4 (before gamut limits).
    let mut c = 18.0 + 70.0 * (1.0 - ((t - 0.4) / 0.6).powi(2)).max(0.0);
    loop {
        let rgb = lab_to_linear_rgb(l, c * h.cos(), c * h.sin());
        if rgb.iter().all(|v| (-1e-9..=1.0 + 1e-9).contains(v)) || c <= 0.0 {
            // Of the 8 floor/ceil roundings to 8 bits, keep the one whose L*
            // is closest to the target (keeps the 8-bit ramp monotonic).
            let e: Vec<f64> = rgb
                .iter()
                .map(|v| srgb_encode(v.clamp(0.0, 1.0)) * 255.0)
                .collect();
            let mut best = ([0u8; 3], f64::INFINITY);
            for m in 0..8u8 {
                let pick = |i: usize| {
                    let v = if m >> i & 1 == 1 {
                        e[i].ceil()
                    } else {
                        e[i].floor()
                    };
                    v.clamp(0.0, 255.0) as u8
                };
                let cand = [pick(0), pick(1), pick(2)];
                let err = (srgb8_lightness(cand) - l).abs();
                if err < best.1 {
                    best = (cand, err);
                }
            }
            return best.0;
        }
        c = (c - 0.5).max(0.0);
    }
}

/// The colour scale of one image: `sqrt(Z / z_top)` from the darkest to
/// the lightest colour (see the module docs).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ColourScale {
    /// Normalised energy at the lightest colour (louder pixels, if any,
    /// saturate).
    pub z_top: f64,
    /// The scan's trigger threshold in normalised energy, marked on the
    /// bar; None when unknown (e.g. imported triggers).
    pub z_threshold: Option<f64>,
}

impl ColourScale {
    /// The scale of `map`: top at the larger of its peak and `z_threshold`
    /// (at least 2), rounded up to two significant figures.
    pub fn for_map(map: &[f32], z_threshold: Option<f64>) -> ColourScale {
        let peak = map
            .iter()
            .copied()
            .filter(|z| z.is_finite())
            .fold(0.0f32, f32::max);
        let top = f64::from(peak).max(z_threshold.unwrap_or(0.0)).max(2.0);
        ColourScale {
            z_top: round_up_2sig(top),
            z_threshold,
        }
    }

    /// Position of `z` on the ramp, 0..1.
    pub fn unit(&self, z: f64) -> f64 {
        (z.max(0.0) / self.z_top).sqrt().clamp(0.0, 1.0)
    }

    /// Normalised energy at ramp position `u` (inverse of [`Self::unit`]).
    pub fn z_at(&self, u: f64) -> f64 {
        u * u * self.z_top
    }

    /// A one-line description for captions and messages.
    pub fn describe(&self) -> String {
        let thr = self
            .z_threshold
            .map(|z| format!(", scan threshold Z = {} marked", crate::output::fixed(z, 1)))
            .unwrap_or_default();
        format!(
            "colour: sqrt of normalised energy Z from 0 to {} (this image's peak or the threshold){thr}",
            crate::output::fixed(self.z_top, 1)
        )
    }
}

/// `v > 0` rounded up to two significant figures (123 → 130, 2.01 → 2.1).
fn round_up_2sig(v: f64) -> f64 {
    let p = 10f64.powf(v.log10().floor() - 1.0);
    (v / p - 1e-9).ceil() * p
}

/// The 256-entry lookup table of the ramp.
fn lut() -> Vec<[u8; 3]> {
    (0..256).map(|i| colour(i as f64 / 255.0)).collect()
}

fn check_map(map: &[f32], n_times: usize, n_freqs: usize, path: &Path) -> Result<()> {
    if map.len() != n_times * n_freqs || map.is_empty() {
        bail!(
            "image {}: map has {} values, expected {n_times} × {n_freqs}",
            path.display(),
            map.len()
        );
    }
    Ok(())
}

/// Paint a `[time][freq]` map into `img` at `(x0, y0)`, cells of `cell_px`
/// (width, height), time left to right and frequency bottom to top.
fn paint_map(
    img: &mut RgbImage,
    (x0, y0): (u32, u32),
    map: &[f32],
    (n_times, n_freqs): (usize, usize),
    cell_px: (u32, u32),
    scale: &ColourScale,
) {
    let lut = lut();
    for x in 0..n_times as u32 * cell_px.0 {
        for y in 0..n_freqs as u32 * cell_px.1 {
            let t = (x / cell_px.0) as usize;
            let f = n_freqs - 1 - (y / cell_px.1) as usize;
            let u = scale.unit(f64::from(map[t * n_freqs + f]));
            img.put_pixel(x0 + x, y0 + y, Rgb(lut[(u * 255.0).round() as usize]));
        }
    }
}

/// Write a PNG of one `[time][freq]` map (`n_times × n_freqs` values of
/// normalised energy Z) with [`CELL_PX`] cells, on `scale`.
///
/// # Errors
/// Map size mismatch, or the file cannot be written.
pub fn render_thumbnail(
    map: &[f32],
    n_times: usize,
    n_freqs: usize,
    scale: &ColourScale,
    path: &Path,
) -> Result<()> {
    render_map(map, n_times, n_freqs, (CELL_PX, CELL_PX), scale, path)
}

/// Render a `[time][freq]` map as a bare PNG (no axes; the report draws
/// them) with cells of `cell_px` (width, height) pixels, time left to right
/// and frequency bottom to top, on `scale`.
///
/// # Errors
/// A map whose length is not `n_times × n_freqs`, or a failed write.
pub fn render_map(
    map: &[f32],
    n_times: usize,
    n_freqs: usize,
    cell_px: (u32, u32),
    scale: &ColourScale,
    path: &Path,
) -> Result<()> {
    check_map(map, n_times, n_freqs, path)?;
    if cell_px.0 == 0 || cell_px.1 == 0 {
        bail!("image {}: empty cells", path.display());
    }
    let mut img = RgbImage::new(n_times as u32 * cell_px.0, n_freqs as u32 * cell_px.1);
    paint_map(&mut img, (0, 0), map, (n_times, n_freqs), cell_px, scale);
    img.save(path)
        .with_context(|| format!("writing image {}", path.display()))?;
    Ok(())
}

// ---- the annotated plate -------------------------------------------------

const INK: Rgb<u8> = Rgb([32, 32, 36]);
const PAPER: Rgb<u8> = Rgb([250, 249, 246]);
/// Glyph cell of the 8 × 8 bitmap font (public-domain font8x8 crate).
const GLYPH_PX: u32 = 8;

/// Draw `s` with its top-left corner at `(x, y)`; characters outside ASCII
/// are drawn as '?'.
fn draw_text(img: &mut RgbImage, x: i64, y: i64, s: &str) {
    for (k, ch) in s.chars().enumerate() {
        let code = if ch.is_ascii() {
            ch as usize
        } else {
            b'?' as usize
        };
        let glyph = font8x8::legacy::BASIC_LEGACY[code];
        for (row, bits) in glyph.iter().enumerate() {
            for col in 0..8 {
                if bits >> col & 1 == 1 {
                    let (px, py) = (x + (k as i64) * 8 + col, y + row as i64);
                    if px >= 0 && py >= 0 && (px as u32) < img.width() && (py as u32) < img.height()
                    {
                        img.put_pixel(px as u32, py as u32, INK);
                    }
                }
            }
        }
    }
}

fn text_width(s: &str) -> i64 {
    (s.chars().count() as u32 * GLYPH_PX) as i64
}

fn hline(img: &mut RgbImage, x0: u32, x1: u32, y: u32) {
    for x in x0..=x1.min(img.width() - 1) {
        img.put_pixel(x, y.min(img.height() - 1), INK);
    }
}

fn vline(img: &mut RgbImage, x: u32, y0: u32, y1: u32) {
    for y in y0..=y1.min(img.height() - 1) {
        img.put_pixel(x.min(img.width() - 1), y, INK);
    }
}

/// Tick values of a linear axis from `lo` to `hi`: a 1-2-5 step giving
/// 3–7 ticks.
pub fn linear_ticks(lo: f64, hi: f64) -> Vec<f64> {
    let raw = (hi - lo) / 4.0;
    let p = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * p)
        .find(|s| (hi - lo) / s <= 6.0)
        .unwrap_or(10.0 * p);
    let mut v = (lo / step).ceil() * step;
    let mut out = Vec::new();
    while v <= hi + 1e-9 * step {
        out.push(if v.abs() < 1e-9 * step { 0.0 } else { v });
        v += step;
    }
    out
}

/// Tick values of a log axis from `lo` to `hi`: 1-2-5 per decade, thinned
/// to powers of ten and their doubles/fives so that at most 8 remain.
pub fn log_ticks(lo: f64, hi: f64) -> Vec<f64> {
    for mantissas in [&[1.0, 2.0, 5.0][..], &[1.0, 3.0][..], &[1.0][..]] {
        let mut out = Vec::new();
        let mut d = 10f64.powf(lo.log10().floor());
        while d <= hi {
            for m in mantissas {
                let v = m * d;
                if v >= lo * (1.0 - 1e-9) && v <= hi * (1.0 + 1e-9) {
                    out.push(v);
                }
            }
            d *= 10.0;
        }
        if out.len() <= 8 && out.len() >= 2 || mantissas.len() == 1 {
            return out;
        }
    }
    Vec::new()
}

/// Short tick label: up to 3 decimals, trailing zeros dropped.
fn tick_label(v: f64) -> String {
    let a = v.abs();
    let d = if a == 0.0 || a >= 10.0 {
        0
    } else if a >= 1.0 {
        1
    } else if a >= 0.1 {
        2
    } else {
        3
    };
    crate::output::fixed(v, d)
}

/// Layout of the annotated plate \[px\].
const PLATE_LEFT: u32 = 64;
const PLATE_TOP: u32 = 30;
const PLATE_BOTTOM: u32 = 40;
const PLATE_RIGHT: u32 = 110;
const BAR_W: u32 = 14;

/// Write a self-explaining PNG: the map (`[time][freq]`, cells of
/// `cell_px`) framed by a frequency axis (log, Hz), a time axis (seconds
/// from the trigger's peak), a colour bar with the scale's top and the
/// threshold marked, and `caption` above. Returns the image size.
///
/// # Errors
/// Map size mismatch, or the file cannot be written.
pub fn render_plate(
    map: &[f32],
    (n_times, n_freqs): (usize, usize),
    cell_px: (u32, u32),
    extent: &ImageExtent,
    scale: &ColourScale,
    caption: &str,
    path: &Path,
) -> Result<(u32, u32)> {
    check_map(map, n_times, n_freqs, path)?;
    let (pw, ph) = (n_times as u32 * cell_px.0, n_freqs as u32 * cell_px.1);
    let (w, h) = (PLATE_LEFT + pw + PLATE_RIGHT, PLATE_TOP + ph + PLATE_BOTTOM);
    let mut img = RgbImage::from_pixel(w, h, PAPER);
    paint_map(
        &mut img,
        (PLATE_LEFT, PLATE_TOP),
        map,
        (n_times, n_freqs),
        cell_px,
        scale,
    );
    let (x0, y0) = (PLATE_LEFT, PLATE_TOP);
    // Frame.
    hline(&mut img, x0 - 1, x0 + pw, y0 - 1);
    hline(&mut img, x0 - 1, x0 + pw, y0 + ph);
    vline(&mut img, x0 - 1, y0 - 1, y0 + ph);
    vline(&mut img, x0 + pw, y0 - 1, y0 + ph);
    draw_text(&mut img, 4, 6, caption);
    // Frequency axis (log).
    let (f_lo, f_hi) = extent.f_edges_hz;
    let y_of = |f: f64| y0 as f64 + ph as f64 * (1.0 - (f / f_lo).ln() / (f_hi / f_lo).ln());
    for f in log_ticks(f_lo, f_hi) {
        let y = y_of(f).round() as u32;
        hline(&mut img, x0 - 5, x0 - 1, y);
        let s = tick_label(f);
        draw_text(&mut img, (x0 - 8) as i64 - text_width(&s), y as i64 - 4, &s);
    }
    draw_text(&mut img, 4, y0 as i64 - 12, "Hz");
    // Time axis.
    let half = 0.5 * extent.span_s;
    for t in linear_ticks(-half, half) {
        let x = (x0 as f64 + pw as f64 * (t + half) / extent.span_s).round() as u32;
        vline(&mut img, x, y0 + ph, y0 + ph + 4);
        let s = tick_label(t);
        draw_text(
            &mut img,
            x as i64 - text_width(&s) / 2,
            (y0 + ph + 7) as i64,
            &s,
        );
    }
    let title = "time from peak [s]";
    draw_text(
        &mut img,
        (x0 + pw / 2) as i64 - text_width(title) / 2,
        (y0 + ph + 24) as i64,
        title,
    );
    // Colour bar: sqrt scale, ticks labelled in Z.
    let bx = x0 + pw + 14;
    let lut = lut();
    for y in 0..ph {
        let u = 1.0 - f64::from(y) / f64::from(ph - 1);
        let c = Rgb(lut[(u * 255.0).round() as usize]);
        for x in bx..bx + BAR_W {
            img.put_pixel(x, y0 + y, c);
        }
    }
    vline(&mut img, bx - 1, y0 - 1, y0 + ph);
    vline(&mut img, bx + BAR_W, y0 - 1, y0 + ph);
    hline(&mut img, bx - 1, bx + BAR_W, y0 - 1);
    hline(&mut img, bx - 1, bx + BAR_W, y0 + ph);
    let y_of_z = |z: f64| y0 as f64 + (ph - 1) as f64 * (1.0 - scale.unit(z));
    let mut marks = vec![0.0, scale.z_top];
    let mid = scale.z_at(0.5);
    marks.push(mid);
    for z in marks {
        let y = y_of_z(z).round() as u32;
        hline(&mut img, bx + BAR_W, bx + BAR_W + 4, y);
        draw_text(
            &mut img,
            (bx + BAR_W + 7) as i64,
            y as i64 - 4,
            &tick_label(z),
        );
    }
    if let Some(zt) = scale.z_threshold.filter(|z| *z <= scale.z_top) {
        let y = y_of_z(zt).round() as u32;
        hline(&mut img, bx - 6, bx + BAR_W + 4, y);
        // Just below the top, the label goes under its tick.
        let ty = if y < y0 + 10 {
            y as i64 + 3
        } else {
            y as i64 - 4
        };
        draw_text(&mut img, (bx + BAR_W + 7) as i64, ty, "thr");
    }
    draw_text(&mut img, bx as i64 - 4, y0 as i64 - 12, "Z");
    img.save(path)
        .with_context(|| format!("writing image {}", path.display()))?;
    Ok((w, h))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lightness_reference_values() {
        // sRGB white is L* = 100; sRGB grey 119 is L* ≈ 50.0 and grey 128
        // is L* ≈ 53.59 (CIE 1976 with IEC 61966-2-1 sRGB; from memory).
        assert!((srgb8_lightness([255, 255, 255]) - 100.0).abs() < 0.01);
        assert!((srgb8_lightness([119, 119, 119]) - 50.0).abs() < 0.3);
        assert!((srgb8_lightness([128, 128, 128]) - 53.59).abs() < 0.05);
    }

    #[test]
    fn lightness_is_monotonic() {
        // Every 8-bit entry of the 256-step ramp, converted back to L*,
        // rises strictly with the value, nearly linearly from 12 to 97.
        let ls: Vec<f64> = (0..256)
            .map(|i| srgb8_lightness(colour(i as f64 / 255.0)))
            .collect();
        for (i, w) in ls.windows(2).enumerate() {
            assert!(w[1] > w[0], "L* not rising at {i}: {} -> {}", w[0], w[1]);
        }
        for (i, l) in ls.iter().enumerate() {
            let want = L_RANGE.0 + (L_RANGE.1 - L_RANGE.0) * i as f64 / 255.0;
            assert!((l - want).abs() < 0.6, "entry {i}: L* {l} vs {want}");
        }
    }

    #[test]
    fn ramp_hue_runs_through_red_and_orange() {
        // Mid-ramp colours are warm (red channel the largest), unlike a
        // path through blue and teal; the ends are dark plum and pale straw.
        for t in [0.3, 0.5, 0.7] {
            let [r, g, b] = colour(t);
            assert!(r > g && r > b, "t = {t}: {r} {g} {b}");
        }
        let [r, g, b] = colour(1.0);
        assert!(r > 230 && g > 230 && b < r, "{r} {g} {b}");
    }

    #[test]
    fn scale_tops_at_peak_or_threshold() {
        let s = ColourScale::for_map(&[1.0, 3.0, 123.0], Some(16.1));
        assert_eq!(s.z_top, 130.0);
        assert!((s.unit(130.0) - 1.0).abs() < 1e-12);
        assert!((s.unit(32.5) - 0.5).abs() < 1e-12); // sqrt scale
        assert!((s.z_at(0.5) - 32.5).abs() < 1e-9);
        // A quiet map tops at the threshold.
        let q = ColourScale::for_map(&[1.0, 3.0], Some(16.1));
        assert_eq!(q.z_top, 17.0);
        assert_eq!(round_up_2sig(2.01), 2.1);
        assert_eq!(round_up_2sig(123.0), 130.0);
    }

    #[test]
    fn writes_png_on_its_own_scale() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("t.png");
        let mut map = vec![1.0f32; 4 * 3];
        map[2] = 100.0; // time 0, highest frequency: the peak
        map[11] = 25.0; // time 3, highest frequency
        let s = ColourScale::for_map(&map, None);
        assert_eq!(s.z_top, 100.0);
        render_thumbnail(&map, 4, 3, &s, &p).unwrap();
        let img = image::open(&p).unwrap().to_rgb8();
        assert_eq!(img.dimensions(), (4 * CELL_PX, 3 * CELL_PX));
        assert_eq!(img.get_pixel(0, 0).0, colour(1.0)); // top-left = time 0, top freq
                                                        // Z = 25 is half way on the sqrt scale: entry round(127.5) = 128.
        assert_eq!(img.get_pixel(3 * CELL_PX, 0).0, colour(128.0 / 255.0));
        assert!(render_thumbnail(&map, 5, 3, &s, &p).is_err());
    }

    #[test]
    fn ticks() {
        assert_eq!(linear_ticks(-0.5, 0.5), vec![-0.4, -0.2, 0.0, 0.2, 0.4]);
        assert_eq!(log_ticks(15.0, 130.0), vec![20.0, 50.0, 100.0]);
        let many = log_ticks(1.0, 10000.0);
        assert!(many.len() <= 8 && many.contains(&1000.0), "{many:?}");
    }

    #[test]
    fn plate_has_axes_bar_and_caption() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("plate.png");
        let map: Vec<f32> = (0..16 * 8).map(|i| (i % 7) as f32).collect();
        let ext = ImageExtent {
            span_s: 1.0,
            f_edges_hz: (20.0, 500.0),
        };
        let s = ColourScale::for_map(&map, Some(4.0));
        let (w, h) = render_plate(&map, (16, 8), (8, 8), &ext, &s, "trigger 7", &p).unwrap();
        let img = image::open(&p).unwrap().to_rgb8();
        assert_eq!(img.dimensions(), (w, h));
        assert_eq!(
            (w, h),
            (
                PLATE_LEFT + 128 + PLATE_RIGHT,
                PLATE_TOP + 64 + PLATE_BOTTOM
            )
        );
        // Ink in the caption row, the frame, and the bar's lightest colour at its top.
        assert!((0..w).any(|x| (6..14).any(|y| img.get_pixel(x, y).0 == INK.0)));
        assert_eq!(img.get_pixel(PLATE_LEFT - 1, PLATE_TOP + 10).0, INK.0);
        let bx = PLATE_LEFT + 128 + 14;
        assert_eq!(img.get_pixel(bx + 3, PLATE_TOP).0, colour(1.0));
    }
}
