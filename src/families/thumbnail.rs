//! PNG thumbnails of energy maps with our own perceptually ordered colour
//! map and a fixed energy scale (Z from [`Z_MIN`] to [`Z_MAX`]), so images of
//! different triggers are comparable.
//!
//! Colour map: a path in CIELAB (CIE 1976, D65 white) with lightness L*
//! rising linearly from 14 to 96 while the hue turns from violet (300°)
//! through blue and teal to yellow (85°), chroma peaking mid-way. Colours
//! outside the sRGB gamut have their chroma reduced (L* and hue kept), so
//! lightness stays linear in the value. Checked by converting every
//! 8-bit colour back to L* (test `lightness_is_monotonic`).

use anyhow::{bail, Context, Result};
use std::path::Path;

/// Energy mapped to the darkest colour.
pub const Z_MIN: f32 = 0.0;
/// Energy mapped to the brightest colour (louder tiles saturate).
pub const Z_MAX: f32 = 25.0;
/// Pixels per map cell in each direction.
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

/// Colour of a value `t` in 0..1 (clamped).
pub fn colour(t: f64) -> [u8; 3] {
    let t = t.clamp(0.0, 1.0);
    let l = 14.0 + 82.0 * t;
    let h = (300.0 - 215.0 * t).to_radians();
    let mut c = 20.0 + 160.0 * t * (1.0 - t);
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

/// Write a PNG of one `[time][freq]` map (`n_times × n_freqs` values of
/// normalised energy Z): time left to right, frequency bottom to top,
/// Z from [`Z_MIN`] to [`Z_MAX`] on the fixed colour map.
///
/// # Errors
/// Map size mismatch, or the file cannot be written.
pub fn render_thumbnail(map: &[f32], n_times: usize, n_freqs: usize, path: &Path) -> Result<()> {
    render_map(map, n_times, n_freqs, (CELL_PX, CELL_PX), path)
}

/// Render a `[time][freq]` map as a PNG with cells of `cell_px` (width,
/// height) pixels, time left to right and frequency bottom to top, on the
/// fixed colour map and energy scale.
///
/// # Errors
/// A map whose length is not `n_times × n_freqs`, or a failed write.
pub fn render_map(
    map: &[f32],
    n_times: usize,
    n_freqs: usize,
    cell_px: (u32, u32),
    path: &Path,
) -> Result<()> {
    if map.len() != n_times * n_freqs || map.is_empty() || cell_px.0 == 0 || cell_px.1 == 0 {
        bail!(
            "thumbnail {}: map has {} values, expected {n_times} × {n_freqs}",
            path.display(),
            map.len()
        );
    }
    let lut: Vec<[u8; 3]> = (0..256).map(|i| colour(i as f64 / 255.0)).collect();
    let (w, h) = (n_times as u32 * cell_px.0, n_freqs as u32 * cell_px.1);
    let img = image::RgbImage::from_fn(w, h, |x, y| {
        let t = (x / cell_px.0) as usize;
        let f = n_freqs - 1 - (y / cell_px.1) as usize;
        let z = map[t * n_freqs + f];
        let u = ((z - Z_MIN) / (Z_MAX - Z_MIN)).clamp(0.0, 1.0);
        image::Rgb(lut[(u * 255.0).round() as usize])
    });
    img.save(path)
        .with_context(|| format!("writing thumbnail {}", path.display()))?;
    Ok(())
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
        // Every 8-bit entry of the 256-step map, converted back to L*, rises
        // strictly with the value, nearly linearly from 14 to 96.
        let ls: Vec<f64> = (0..256)
            .map(|i| srgb8_lightness(colour(i as f64 / 255.0)))
            .collect();
        for (i, w) in ls.windows(2).enumerate() {
            assert!(w[1] > w[0], "L* not rising at {i}: {} -> {}", w[0], w[1]);
        }
        for (i, w) in ls.windows(3).enumerate() {
            assert!(w[2] > w[0], "L* flat over 2 steps at {i}");
        }
        for (i, l) in ls.iter().enumerate() {
            let want = 14.0 + 82.0 * i as f64 / 255.0;
            assert!((l - want).abs() < 0.6, "entry {i}: L* {l} vs {want}");
        }
    }

    #[test]
    fn writes_png_with_fixed_scale() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("t.png");
        let mut map = vec![1.0f32; 4 * 3];
        map[2] = 25.0; // time 0, highest frequency
        map[11] = 100.0; // time 3, highest frequency: saturates like 25
        render_thumbnail(&map, 4, 3, &p).unwrap();
        let img = image::open(&p).unwrap().to_rgb8();
        assert_eq!(img.dimensions(), (4 * CELL_PX, 3 * CELL_PX));
        assert_eq!(img.get_pixel(0, 0).0, colour(1.0)); // top-left = time 0, top freq
        assert_eq!(img.get_pixel(3 * CELL_PX, 0).0, colour(1.0));
        // Z = 1 is entry round(255 / 25) = 10 of the fixed scale.
        assert_eq!(img.get_pixel(CELL_PX, 2 * CELL_PX).0, colour(10.0 / 255.0));
        assert!(render_thumbnail(&map, 5, 3, &p).is_err());
    }
}
