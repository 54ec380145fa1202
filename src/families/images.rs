//! Spectrogram images of triggers from the catalogue, sized to the glitch:
//! a span of 8 base durations of the trigger (see [`image_view`]) and a
//! frequency range from its own extent inside the channel's analysed band,
//! from the scanned data, or the stored fingerprint map when the data
//! cannot be read any more; a few representative members of every family
//! for the report, with the witnessing aux channel beside the first.
//! Pixels, the colour ramp and the per-image colour scale are in
//! [`super::thumbnail`].

use super::db::{family_member_ids, list_families, trigger_row};
use super::features::{
    blob_to_f32, fingerprint, EnergyMapSource, MapLayout, ScanBand, FEATURE_VERSION, MAP_LEN,
    N_FREQS, N_SPANS, N_TIMES,
};
use super::thumbnail::ColourScale;
use crate::trigger::Trigger;
use anyhow::{bail, Context, Result};
use rusqlite::{Connection, OptionalExtension};

/// Time bins of a spectrogram image.
const IMAGE_TIMES: usize = 128;
/// Log-frequency rows of a spectrogram image.
const IMAGE_FREQS: usize = 64;
/// Image span in base durations of the trigger (its extent or one tile at
/// its Q, whichever is longer): the third fingerprint span.
const IMAGE_SPAN_INDEX: usize = 2;
/// Frequency margin beyond the trigger's extent, each side (a factor).
const IMAGE_F_MARGIN: f64 = 2.0;
/// The smallest frequency range of an image (a factor: three octaves).
const IMAGE_MIN_F_RATIO: f64 = 8.0;
/// Frequency range of an image when the channel's band is unknown \[Hz\].
const DEFAULT_BAND_HZ: (f64, f64) = (1.0, 8192.0);

/// What a spectrogram image shows: time `t_peak ± span_s/2` left to right,
/// frequency bottom to top on a log scale between the outer edges of its
/// first and last rows.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ImageExtent {
    /// Time span \[s\], centred on the trigger's peak.
    pub span_s: f64,
    /// Frequency at the bottom and top edges of the image \[Hz\].
    pub f_edges_hz: (f64, f64),
}

impl ImageExtent {
    /// Extent of `n` log-spaced rows centred on `f_lo..=f_hi`: each row is
    /// one log step tall, so the edges lie half a step outside.
    fn log_rows(span_s: f64, f_lo: f64, f_hi: f64, n: usize) -> ImageExtent {
        let half = 0.5 * (f_hi / f_lo).ln() / (n.max(2) - 1) as f64;
        ImageExtent {
            span_s,
            f_edges_hz: (f_lo * (-half).exp(), f_hi * half.exp()),
        }
    }
}

/// Where the image of `trig` lies, from the trigger itself: a span of 8
/// base durations (its extent or one tile at its Q, whichever is longer;
/// see [`MapLayout`]), and the trigger's frequency extent widened by a
/// factor 2 each side to at least three octaves, inside the channel's
/// analysed `band` when known. Returns the span \[s\] and the centres of
/// the first and last rows \[Hz\].
pub fn image_view(trig: &Trigger, band: Option<&ScanBand>) -> (f64, f64, f64) {
    let lay = MapLayout::of(trig);
    let f = lay.f_hz;
    let finite_or = |v: f64| if v.is_finite() && v > 0.0 { v } else { f };
    let mut lo = finite_or(trig.f_low).min(f) / IMAGE_F_MARGIN;
    let mut hi = finite_or(trig.f_high).max(f) * IMAGE_F_MARGIN;
    let widen = |lo: &mut f64, hi: &mut f64| {
        let r = *hi / *lo;
        if r < IMAGE_MIN_F_RATIO {
            let k = (IMAGE_MIN_F_RATIO / r).sqrt();
            *lo /= k;
            *hi *= k;
        }
    };
    widen(&mut lo, &mut hi);
    let (b_lo, b_hi) = band.map_or(DEFAULT_BAND_HZ, |b| (b.f_lo_hz, b.f_hi_hz));
    // Slide the window into the band before clipping, so that a trigger at
    // the band's edge keeps three octaves where the band has them.
    if lo < b_lo {
        hi *= b_lo / lo;
        lo = b_lo;
    }
    if hi > b_hi {
        lo = (lo * b_hi / hi).max(b_lo);
        hi = b_hi;
    }
    if hi <= lo {
        hi = lo * IMAGE_MIN_F_RATIO;
    }
    (lay.spans_s[IMAGE_SPAN_INDEX], lo, hi)
}

/// The image of `channel` around `t_gps`: a map `span_s` wide at quality
/// `q` with log rows from `f_lo` to `f_hi` \[Hz\], and its colour scale
/// (from the map's peak and the channel's scan threshold).
fn channel_map(
    src: &dyn EnergyMapSource,
    channel: &str,
    t_gps: f64,
    (span_s, f_lo, f_hi): (f64, f64, f64),
    q: f64,
) -> Result<(Vec<f32>, ImageExtent, ColourScale)> {
    let freqs = super::features::log_grid(f_lo, f_hi, IMAGE_FREQS);
    let map = src.energy_map(channel, t_gps, span_s, q, &freqs, IMAGE_TIMES)?;
    let scale = ColourScale::for_map(&map, src.scan_band(channel, t_gps).map(|b| b.z_threshold));
    Ok((
        map,
        ImageExtent::log_rows(span_s, f_lo, f_hi, IMAGE_FREQS),
        scale,
    ))
}

/// How an image is written: bare for the report (which draws its own axes)
/// or as a self-explaining plate with axes, colour bar and caption.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ImageStyle {
    /// Pixels only, 4 × 4 px per cell.
    Bare,
    /// Axes, colour bar and caption around 4 × 4 px cells.
    Plate,
}

/// Write a PNG spectrogram image of one target trigger to `path`: a fresh
/// map from `src` over the trigger's own span and band (see
/// [`image_view`]), or, when the data cannot be read any more, the stored
/// fingerprint map (8 base durations wide). Returns what the image shows
/// and its colour scale.
///
/// # Errors
/// Unknown trigger id, or no map can be computed or written.
pub fn render_trigger_thumbnail(
    conn: &Connection,
    trigger_id: i64,
    src: &dyn EnergyMapSource,
    path: &std::path::Path,
    style: ImageStyle,
) -> Result<(ImageExtent, ColourScale)> {
    let row = trigger_row(conn, trigger_id)?.ok_or_else(|| {
        crate::Error::not_found(
            "trigger",
            trigger_id,
            format!("no trigger with id {trigger_id}"),
        )
    })?;
    let caption = format!(
        "trigger {} {} GPS {:.3} {:.1} Hz SNR {:.1} Q {:.1}",
        row.id, row.channel, row.trig.t_peak, row.trig.f_peak, row.trig.snr, row.trig.q
    );
    let write = |map: &[f32],
                 dims: (usize, usize),
                 cell: (u32, u32),
                 e: &ImageExtent,
                 s: &ColourScale| {
        match style {
            ImageStyle::Bare => super::thumbnail::render_map(map, dims.0, dims.1, cell, s, path),
            ImageStyle::Plate => {
                super::thumbnail::render_plate(map, dims, cell, e, s, &caption, path).map(|_| ())
            }
        }
    };
    let view = image_view(
        &row.trig,
        src.scan_band(&row.channel, row.trig.t_peak).as_ref(),
    );
    let q = super::features::map_q(&row.trig);
    if let Ok((map, extent, scale)) = channel_map(src, &row.channel, row.trig.t_peak, view, q) {
        write(&map, (IMAGE_TIMES, IMAGE_FREQS), (4, 4), &extent, &scale)?;
        return Ok((extent, scale));
    }
    let stored: Option<(i64, Vec<u8>)> = conn
        .query_row(
            "SELECT version, maps FROM features WHERE trigger_id = ?1",
            [trigger_id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    let maps = match stored {
        Some((v, m)) if v == FEATURE_VERSION => blob_to_f32(&m)?,
        _ => {
            fingerprint(&row.trig, &row.channel, src)
                .with_context(|| format!("fingerprint of trigger {}", row.id))?
                .maps
        }
    };
    if maps.len() != N_SPANS * MAP_LEN {
        bail!(
            "thumbnail: stored maps of trigger {trigger_id} have {} values",
            maps.len()
        );
    }
    // The stored span of 8 base durations, in the trigger's own frame.
    let map = &maps[IMAGE_SPAN_INDEX * MAP_LEN..(IMAGE_SPAN_INDEX + 1) * MAP_LEN];
    let lay = MapLayout::of(&row.trig);
    let freqs = lay.map_freqs_hz();
    let extent = ImageExtent::log_rows(
        lay.spans_s[IMAGE_SPAN_INDEX],
        freqs[0],
        freqs[N_FREQS - 1],
        N_FREQS,
    );
    let scale = ColourScale::for_map(map, None);
    let cell = (super::thumbnail::CELL_PX, super::thumbnail::CELL_PX);
    write(map, (N_TIMES, N_FREQS), cell, &extent, &scale)?;
    Ok((extent, scale))
}

/// A spectrogram image of one family member (or of the aux channel that
/// witnesses its family, at the member's time), with what it shows.
#[derive(Debug, Clone, PartialEq)]
pub struct Thumbnail {
    /// Family of the trigger.
    pub family_id: i64,
    /// Trigger id (the target trigger; for a witness image, the member it
    /// stands beside).
    pub trigger_id: i64,
    /// Channel shown.
    pub channel: String,
    /// True for the witnessing aux channel's image.
    pub witness: bool,
    /// The PNG.
    pub path: std::path::PathBuf,
    /// Peak time of the trigger shown \[GPS s\] (the image's centre).
    pub t_peak_gps: f64,
    /// Peak frequency \[Hz\] (NaN for a witness image with no aux trigger).
    pub f_peak_hz: f64,
    /// Signal-to-noise ratio (NaN as above).
    pub snr: f64,
    /// Quality factor of the map.
    pub q: f64,
    /// Axes of the image.
    pub extent: ImageExtent,
    /// Its colour scale.
    pub scale: ColourScale,
}

/// Thumbnails of up to `per_family` representative members (most probable
/// first) of every active family, written as
/// `dir/family_<id>_trigger_<trigger id>.png`; and for each family in
/// `witnesses` (family id, aux channel, coincidence window \[s\]) the aux
/// channel's image at the time of the first member its scans hold (none
/// when they hold none, e.g. an aux channel imported without data), written
/// as `dir/family_<id>_trigger_<trigger id>_aux.png`.
///
/// # Errors
/// The directory cannot be made, or an image cannot be computed or written.
pub fn render_family_thumbnails(
    conn: &Connection,
    src: &dyn EnergyMapSource,
    dir: &std::path::Path,
    per_family: usize,
    witnesses: &[(i64, String, f64)],
) -> Result<Vec<Thumbnail>> {
    render_thumbnails_of(conn, src, dir, per_family, witnesses, None)
}

/// As [`render_family_thumbnails`], for the families in `only` when given.
fn render_thumbnails_of(
    conn: &Connection,
    src: &dyn EnergyMapSource,
    dir: &std::path::Path,
    per_family: usize,
    witnesses: &[(i64, String, f64)],
    only: Option<&[i64]>,
) -> Result<Vec<Thumbnail>> {
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    let mut out = Vec::new();
    let wanted = |id: i64| only.is_none_or(|ids| ids.contains(&id));
    for f in list_families(conn)?
        .iter()
        .filter(|f| !f.novel && wanted(f.id))
    {
        let mut rows = Vec::new();
        for t in family_member_ids(conn, f.id, per_family)? {
            let p = dir.join(format!("family_{}_trigger_{t}.png", f.id));
            let (extent, scale) = render_trigger_thumbnail(conn, t, src, &p, ImageStyle::Bare)?;
            let row = trigger_row(conn, t)?.ok_or_else(|| {
                crate::Error::not_found("trigger", t, format!("no trigger with id {t}"))
            })?;
            out.push(Thumbnail {
                family_id: f.id,
                trigger_id: t,
                channel: row.channel.clone(),
                witness: false,
                path: p,
                t_peak_gps: row.trig.t_peak,
                f_peak_hz: row.trig.f_peak,
                snr: row.trig.snr,
                q: super::features::map_q(&row.trig),
                extent,
                scale,
            });
            rows.push(row);
        }
        // The witness beside the first member its data cover (an aux
        // channel's analysed time can start later than the target's: a
        // longer padding, another day's bundle not scanned for it).
        for (_, aux, window_s) in witnesses.iter().filter(|w| w.0 == f.id) {
            // A member at a time the aux channel was analysed (not in one
            // of its dropouts).
            if let Some(row) = rows.iter().find(|r| src.analysed_at(aux, r.trig.t_peak)) {
                let p = dir.join(format!("family_{}_trigger_{}_aux.png", f.id, row.id));
                out.push(witness_image(conn, src, (f.id, row), aux, *window_s, p)?);
            }
        }
    }
    Ok(out)
}

/// How far before or after a target's peak an aux trigger's peak may lie
/// and its extent (padded by the window) still cover the target \[s\].
const AUX_REACH_S: f64 = 8.0;

/// The aux channel `aux` at the time of target trigger `row`, sized to the
/// loudest aux trigger whose extent padded by `window_s` covers the target's
/// peak (the coincidence rule of the witness statistics): sized to
/// that aux trigger (or, with none, to the target's span over the aux
/// channel's whole band at Q 8).
fn witness_image(
    conn: &Connection,
    src: &dyn EnergyMapSource,
    (family_id, row): (i64, &super::db::Row),
    aux: &str,
    window_s: f64,
    path: std::path::PathBuf,
) -> Result<Thumbnail> {
    let near = crate::catalogue::query_triggers(
        conn,
        &crate::catalogue::TriggerQuery {
            channel: Some(aux.to_string()),
            since: Some(row.trig.t_peak - window_s - AUX_REACH_S),
            until: Some(row.trig.t_peak + window_s + AUX_REACH_S),
            ..Default::default()
        },
    )?
    .into_iter()
    .filter(|a| a.t_start - window_s <= row.trig.t_peak && row.trig.t_peak <= a.t_end + window_s)
    .max_by(|a, b| a.snr.total_cmp(&b.snr));
    let band = src.scan_band(aux, row.trig.t_peak);
    let (trig, view) = match &near {
        Some(a) => {
            let trig = a.to_trigger();
            let view = image_view(&trig, band.as_ref());
            (trig, view)
        }
        None => {
            let (span, _, _) = image_view(&row.trig, None);
            let (lo, hi) = band.map_or(DEFAULT_BAND_HZ, |b| (b.f_lo_hz, b.f_hi_hz));
            let trig = crate::trigger::Trigger {
                q: 8.0,
                f_peak: f64::NAN,
                snr: f64::NAN,
                ..row.trig
            };
            (trig, (span, lo, hi))
        }
    };
    let q = super::features::map_q(&trig);
    let (map, extent, scale) = channel_map(src, aux, row.trig.t_peak, view, q)
        .with_context(|| format!("image of witness {aux} at GPS {:.3}", row.trig.t_peak))?;
    super::thumbnail::render_map(&map, IMAGE_TIMES, IMAGE_FREQS, (4, 4), &scale, &path)?;
    Ok(Thumbnail {
        family_id,
        trigger_id: row.id,
        channel: aux.to_string(),
        witness: true,
        path,
        t_peak_gps: row.trig.t_peak,
        f_peak_hz: trig.f_peak,
        snr: trig.snr,
        q,
        extent,
        scale,
    })
}

/// Images per family in the report.
pub const REPORT_IMAGES_PER_FAMILY: usize = 3;

/// The report's images: [`REPORT_IMAGES_PER_FAMILY`] members of each active
/// family of `families` (the report's target channel's) in
/// `out_dir/thumbs`, computed from the files the scans recorded, plus the
/// witnessing aux channel of each family in `witnesses` beside the first
/// member its data cover (see [`render_family_thumbnails`]). When the scan records
/// cannot be read there are no images and the reason is returned beside
/// them (the report goes on without).
///
/// # Errors
/// As [`render_family_thumbnails`]: among them a data file missing or
/// changed since its scan, named in the message (as for `cluster` and
/// `thumbnail`; changed data are never used).
pub fn report_thumbnails(
    conn: &Connection,
    out_dir: &std::path::Path,
    families: &[i64],
    witnesses: &[(i64, String, f64)],
) -> Result<(Vec<Thumbnail>, Option<String>)> {
    let src = match crate::maps::BundleMaps::from_catalogue(conn) {
        Ok(s) => s,
        Err(e) => {
            return Ok((
                Vec::new(),
                Some(format!("no spectrogram images in the report: {e:#}")),
            ))
        }
    };
    let images = render_thumbnails_of(
        conn,
        &src,
        &out_dir.join("thumbs"),
        REPORT_IMAGES_PER_FAMILY,
        witnesses,
        Some(families),
    )?;
    Ok((images, None))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn trig(t0: f64, t1: f64, f_lo: f64, f: f64, f_hi: f64, q: f64) -> Trigger {
        Trigger {
            t_peak: 0.5 * (t0 + t1),
            t_start: t0,
            t_end: t1,
            f_peak: f,
            f_low: f_lo,
            f_high: f_hi,
            snr: 10.0,
            snr_eq: 10.0,
            q,
            energy: 51.0,
        }
    }

    #[test]
    fn image_is_sized_to_the_glitch() {
        let band = ScanBand {
            f_lo_hz: 16.0,
            f_hi_hz: 1024.0,
            z_threshold: 16.1,
        };
        // A 10-ms broadband pulse and a 1.5-s low-frequency arch.
        let pulse = trig(100.0, 100.01, 80.0, 200.0, 500.0, 4.0);
        let arch = trig(100.0, 101.5, 25.0, 40.0, 60.0, 30.0);
        let (sp, lo_p, hi_p) = image_view(&pulse, Some(&band));
        let (sa, lo_a, hi_a) = image_view(&arch, Some(&band));
        // 8 base durations: the pulse's base is one tile at Q 4, 200 Hz
        // (4 σ_t = 4 Q / (2 π f √2)... see MapLayout), the arch its extent.
        assert!((sa - 12.0).abs() < 1e-9, "{sa}");
        assert!(sp < 0.2 && sp > 0.05, "{sp}");
        // The arch's image starts at the band's edge and keeps 3 octaves.
        assert_eq!(lo_a, 16.0);
        assert!(hi_a / lo_a >= 8.0 - 1e-9 && hi_a < 200.0, "{lo_a} {hi_a}");
        // The pulse: its extent widened by 2 each side, inside the band.
        assert!((lo_p - 40.0).abs() < 1e-9 && (hi_p - 1000.0).abs() < 1e-9);
        // A tone near the top of the band slides down, never past it.
        let tone = trig(10.0, 11.0, 990.0, 1000.0, 1010.0, 100.0);
        let (_, lo_t, hi_t) = image_view(&tone, Some(&band));
        assert_eq!(hi_t, 1024.0);
        assert!((hi_t / lo_t - 8.0).abs() < 1e-9);
    }

    #[test]
    fn imported_trigger_without_extent_gets_three_octaves() {
        let t = trig(5.0, 5.0, f64::NAN, 300.0, f64::NAN, f64::NAN);
        let (span, lo, hi) = image_view(&t, None);
        assert!((hi / lo - 8.0).abs() < 1e-9 && lo < 300.0 && hi > 300.0);
        assert!(span > 0.0);
    }
}
