//! Live (analysed) time of a channel, read from the catalogue.
//!
//! `analysed_segments` already holds, per scan, the analysis segments
//! intersected with valid (non-NaN) data; the live time of a channel is the
//! union over all its scans. Any interval's live time is then
//! [`SegmentList::overlap_with`].

use crate::catalogue::from_ns;
use crate::segments::{Segment, SegmentList};
use anyhow::{Context, Result};
use rusqlite::{params, Connection, OptionalExtension};

/// Live time of channel `channel_id`: union of its scans' analysed segments.
///
/// # Errors
/// On SQLite errors.
pub fn live_time(conn: &Connection, channel_id: i64) -> Result<SegmentList> {
    let mut stmt = conn.prepare_cached(
        "SELECT a.start_ns, a.end_ns FROM analysed_segments a \
         JOIN scans s ON s.id = a.scan_id WHERE s.channel_id = ?1",
    )?;
    let segs = stmt
        .query_map(params![channel_id], |r| {
            Ok(Segment::new(from_ns(r.get(0)?), from_ns(r.get(1)?)))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()
        .context("reading analysed_segments")?;
    Ok(SegmentList::from_segments(segs))
}

/// A channel row: id and name.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct ChannelRef {
    /// `channels.id`.
    pub id: i64,
    /// `channels.name`.
    pub name: String,
}

/// The channel named `name`, or else the single channel with role `target`.
///
/// # Errors
/// Unknown name; no target channel; several target channels and no name.
pub fn resolve_channel(conn: &Connection, name: Option<&str>) -> Result<ChannelRef> {
    if let Some(name) = name {
        let id: Option<i64> = conn
            .query_row(
                "SELECT id FROM channels WHERE name = ?1",
                params![name],
                |r| r.get(0),
            )
            .optional()?;
        return match id {
            Some(id) => Ok(ChannelRef {
                id,
                name: name.to_string(),
            }),
            None => {
                return Err(crate::Error::not_found(
                    "channel",
                    name,
                    format!("channel {name:?} is not in the catalogue"),
                )
                .into())
            }
        };
    }
    let mut stmt =
        conn.prepare("SELECT id, name FROM channels WHERE role = 'target' ORDER BY id")?;
    let rows = stmt
        .query_map([], |r| {
            Ok(ChannelRef {
                id: r.get(0)?,
                name: r.get(1)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    match rows.len() {
        0 => Err(crate::Error::not_found(
            "channel",
            "target",
            "the catalogue has no target channel (scan or import one first)",
        )
        .into()),
        1 => Ok(rows.into_iter().next().unwrap()),
        _ => Err(crate::Error::invalid(
            "channel",
            format!(
                "must name one of the catalogue's several target channels ({})",
                rows.iter()
                    .map(|c| c.name.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        )
        .into()),
    }
}

/// Whether a table exists in the catalogue (tables of later stages are
/// optional: a catalogue that was never clustered has no family tables).
///
/// # Errors
/// On SQLite errors.
pub fn table_exists(conn: &Connection, table: &str) -> Result<bool> {
    let n: i64 = conn.query_row(
        "SELECT count(*) FROM sqlite_master WHERE type = 'table' AND name = ?1",
        params![table],
        |r| r.get(0),
    )?;
    Ok(n > 0)
}

/// Live time of channel `channel_id` inside `[start, end)` \[s\].
///
/// # Errors
/// On SQLite errors.
pub fn live_seconds(
    conn: &Connection,
    channel_id: i64,
    start_gps: f64,
    end_gps: f64,
) -> Result<f64> {
    Ok(live_time(conn, channel_id)?.overlap_with(start_gps, end_gps))
}
