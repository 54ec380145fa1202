//! Spectrogram images of triggers from the catalogue: a fresh map from the
//! scanned data, or the stored fingerprint map when the data cannot be read
//! any more; and a few representative members of every family for the
//! report. Pixels and the colour map are in [`super::thumbnail`].

use super::db::{family_member_ids, list_families, trigger_row};
use super::features::{
    blob_to_f32, fingerprint, EnergyMapSource, MapLayout, FEATURE_VERSION, MAP_LEN, N_FREQS,
    N_SPANS, N_TIMES,
};
use anyhow::{bail, Context, Result};
use rusqlite::{Connection, OptionalExtension};

/// Spectrogram image of one trigger: a 2 s normalised-energy map at the
/// trigger's Q, 128 times × 64 log-frequencies (16–2048 Hz), 4 × 4 px cells.
pub const IMAGE_SPAN_S: f64 = 2.0;
/// Lowest image frequency \[Hz\].
const IMAGE_F_MIN_HZ: f64 = 16.0;
/// Highest image frequency \[Hz\].
const IMAGE_F_MAX_HZ: f64 = 2048.0;
const IMAGE_TIMES: usize = 128;
const IMAGE_FREQS: usize = 64;

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

/// Write a PNG spectrogram image of one target trigger to `path`: a fresh
/// high-resolution map from `src` (see [`IMAGE_SPAN_S`]), or, when the data
/// cannot be read any more, the stored fingerprint map (8 base durations wide). Returns what
/// the image shows.
///
/// # Errors
/// Unknown trigger id, or no map can be computed or written.
pub fn render_trigger_thumbnail(
    conn: &Connection,
    trigger_id: i64,
    src: &dyn EnergyMapSource,
    path: &std::path::Path,
) -> Result<ImageExtent> {
    if let Ok(Some(row)) = trigger_row(conn, trigger_id) {
        let freqs = super::features::log_grid(IMAGE_F_MIN_HZ, IMAGE_F_MAX_HZ, IMAGE_FREQS);
        let q = super::features::map_q(&row.trig);
        if let Ok(map) = src.energy_map(
            &row.channel,
            row.trig.t_peak,
            IMAGE_SPAN_S,
            q,
            &freqs,
            IMAGE_TIMES,
        ) {
            super::thumbnail::render_map(&map, IMAGE_TIMES, IMAGE_FREQS, (4, 4), path)?;
            let (lo, hi) = (freqs[0], freqs[IMAGE_FREQS - 1]);
            return Ok(ImageExtent::log_rows(IMAGE_SPAN_S, lo, hi, IMAGE_FREQS));
        }
    }
    let row = trigger_row(conn, trigger_id)?.ok_or_else(|| {
        crate::Error::not_found(
            "trigger",
            trigger_id,
            format!("no trigger with id {trigger_id}"),
        )
    })?;
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
    // The third stored span (8 base durations), in the trigger's own frame.
    const SPAN: usize = 2;
    super::thumbnail::render_thumbnail(
        &maps[SPAN * MAP_LEN..(SPAN + 1) * MAP_LEN],
        N_TIMES,
        N_FREQS,
        path,
    )?;
    let lay = MapLayout::of(&row.trig);
    let freqs = lay.map_freqs_hz();
    Ok(ImageExtent::log_rows(
        lay.spans_s[SPAN],
        freqs[0],
        freqs[N_FREQS - 1],
        N_FREQS,
    ))
}

/// A spectrogram image of one family member, with what it shows.
#[derive(Debug, Clone, PartialEq)]
pub struct Thumbnail {
    /// Family of the trigger.
    pub family_id: i64,
    /// Trigger id.
    pub trigger_id: i64,
    /// The PNG.
    pub path: std::path::PathBuf,
    /// The trigger's peak time \[GPS s\].
    pub t_peak_gps: f64,
    /// Peak frequency \[Hz\].
    pub f_peak_hz: f64,
    /// Signal-to-noise ratio.
    pub snr: f64,
    /// Quality factor of the map (the trigger's Q, see `map_q`).
    pub q: f64,
    /// Axes of the image.
    pub extent: ImageExtent,
}

/// Thumbnails of up to `per_family` representative members (most probable
/// first) of every active family, written as
/// `dir/family_<id>_trigger_<trigger id>.png`.
///
/// # Errors
/// The directory cannot be made, or an image cannot be computed or written.
pub fn render_family_thumbnails(
    conn: &Connection,
    src: &dyn EnergyMapSource,
    dir: &std::path::Path,
    per_family: usize,
) -> Result<Vec<Thumbnail>> {
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    let mut out = Vec::new();
    for f in list_families(conn)?.iter().filter(|f| !f.novel) {
        for t in family_member_ids(conn, f.id, per_family)? {
            let p = dir.join(format!("family_{}_trigger_{t}.png", f.id));
            let extent = render_trigger_thumbnail(conn, t, src, &p)?;
            let row = trigger_row(conn, t)?.ok_or_else(|| {
                crate::Error::not_found("trigger", t, format!("no trigger with id {t}"))
            })?;
            out.push(Thumbnail {
                family_id: f.id,
                trigger_id: t,
                path: p,
                t_peak_gps: row.trig.t_peak,
                f_peak_hz: row.trig.f_peak,
                snr: row.trig.snr,
                q: super::features::map_q(&row.trig),
                extent,
            });
        }
    }
    Ok(out)
}

/// Images per family in the report.
pub const REPORT_IMAGES_PER_FAMILY: usize = 3;

/// The report's images: [`REPORT_IMAGES_PER_FAMILY`] members of every active
/// family in `out_dir/thumbs`, computed from the files the scans recorded.
/// When the scan records cannot be read there are no images and the reason
/// is returned beside them (the report goes on without).
///
/// # Errors
/// As [`render_family_thumbnails`]: among them a data file missing or
/// changed since its scan, named in the message (as for `cluster` and
/// `thumbnail`; changed data are never used).
pub fn report_thumbnails(
    conn: &Connection,
    out_dir: &std::path::Path,
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
    let images = render_family_thumbnails(
        conn,
        &src,
        &out_dir.join("thumbs"),
        REPORT_IMAGES_PER_FAMILY,
    )?;
    Ok((images, None))
}
