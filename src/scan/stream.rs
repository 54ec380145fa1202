//! The scan's single pass over a channel's samples.
//!
//! One reader decodes the samples in order, in chunks of
//! [`STREAM_CHUNK_SAMPLES`]. It finds the dropouts and computes the input
//! checksum exactly as [`SampleSource::survey`] does, keeps the chunks a
//! block may still need, and hands each block to the thread pool, with a
//! copy of its samples, as soon as the block's place is certain. So no
//! sample is decoded twice (a compressed frame file used to be decoded once
//! for the survey and again for the blocks), and memory is bounded by the
//! block length, not by the series: the kept chunks span at most one block
//! and two chunks, and at most one block per thread, plus one, waits for a
//! worker (when more wait, the reader runs one itself; with one thread,
//! reading and blocks simply alternate).
//!
//! When is a block's place certain? Blocks are laid over each stretch of
//! usable data from the stretch's start ([`layout`]); only the last block
//! of a stretch depends on where the stretch ends. After reading samples
//! `[0, pos)`, the reader lays the blocks as if the series ended at `pos`
//! (the open run of finite samples closed there). Let `known` be the end
//! index a stretch cut at `pos` gets: a stretch that ends before `known`
//! ends there for good (its run ended, or an analysis segment did), and one
//! that reaches `known` can only grow, which moves its last block alone,
//! the block ending at `known`. So every block ending before `known` is
//! laid as the whole series will lay it. The layout of the whole series,
//! made at the end from all the runs exactly as before, is checked against
//! the blocks handed out early, and gives the rest.
use super::{lay_blocks, Block, SampleSource};
use crate::io::npy::FiniteRuns;
use crate::segments::{Segment, SegmentList};
use anyhow::{anyhow, bail, Result};
use std::collections::VecDeque;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;

/// Samples the scan's reader decodes at a time (2 MB of f64).
pub const STREAM_CHUNK_SAMPLES: usize = 1 << 18;

/// The sample grid of a series and the block sizes laid on it.
#[derive(Debug, Clone, Copy)]
pub(super) struct Grid {
    /// GPS time of sample 0 \[s\].
    pub t0: f64,
    /// Sample rate \[Hz\].
    pub fs: f64,
    /// Samples per block.
    pub block_n: usize,
    /// Samples of padding at each block edge.
    pub pad: usize,
    /// Shortest stretch analysed \[samples\].
    pub min_len: usize,
}

impl Grid {
    fn time(&self, i: usize) -> f64 {
        self.t0 + i as f64 / self.fs
    }

    /// First sample at or after GPS time `t`.
    fn first_index(&self, t: f64) -> usize {
        ((t - self.t0) * self.fs - 1e-6).ceil().max(0.0) as usize
    }

    /// Index just past the last sample before GPS time `t`, at most `len`.
    fn end_index(&self, t: f64, len: usize) -> usize {
        (((t - self.t0) * self.fs + 1e-6).floor() as usize).min(len)
    }
}

/// The scan's blocks over the runs of finite samples `runs` (index ranges
/// `[start, end)`, in order) of a series of `len` samples, within
/// `segments` when given; and the longest usable stretch \[s\].
pub(super) fn layout(
    runs: &[(usize, usize)],
    len: usize,
    grid: &Grid,
    segments: Option<&SegmentList>,
) -> (Vec<Block>, f64) {
    let valid = SegmentList::from_segments(
        runs.iter()
            .map(|&(a, b)| Segment::new(grid.time(a), grid.time(b)))
            .collect(),
    );
    let usable = match segments {
        Some(s) => valid.intersection(s),
        None => valid,
    };
    let mut blocks = Vec::new();
    let mut longest = 0.0f64;
    for seg in usable.segments() {
        let a = grid.first_index(seg.start);
        let b = grid.end_index(seg.end, len);
        longest = longest.max(seg.duration());
        if b > a && b - a >= grid.min_len {
            blocks.extend(lay_blocks(a, b, grid.block_n, grid.pad));
        }
    }
    (blocks, longest)
}

/// What [`stream_blocks`] found.
pub(super) struct Streamed<T> {
    /// Every block laid, in order, with the work's result.
    pub blocks: Vec<(Block, T)>,
    /// Whether any sample was finite.
    pub any_finite: bool,
    /// The longest stretch of usable data \[s\].
    pub longest: f64,
    /// Hex xxh3-128 of the samples, as [`SampleSource::survey`] gives.
    pub checksum: String,
}

/// A block handed to a worker, with its samples.
struct Job {
    index: usize,
    block: Block,
    samples: Vec<f64>,
}

/// Read `src` once and run `work` on every block of the scan's layout
/// (blocks over the finite samples within `segments`, see [`layout`]) on
/// the current thread pool, as the blocks' samples arrive. `progress`
/// gets the fraction of the series up to the furthest block done, and 1
/// at the end.
///
/// # Errors
/// Read errors of the source, and the first error of `work` (in block
/// order).
pub(super) fn stream_blocks<T: Send>(
    src: &dyn SampleSource,
    grid: &Grid,
    segments: Option<&SegmentList>,
    work: &(dyn Fn(&Block, &[f64]) -> Result<T> + Sync),
    progress: &(dyn Fn(f64) + Sync),
) -> Result<Streamed<T>> {
    let len = src.len();
    let queue: Mutex<VecDeque<Job>> = Mutex::default();
    let results: Mutex<Vec<(usize, Result<T>)>> = Mutex::default();
    // Sample buffers of blocks done, for the next blocks.
    let spare: Mutex<Vec<Vec<f64>>> = Mutex::default();
    let failed = AtomicBool::new(false);
    let covered = AtomicUsize::new(0);
    // Run the oldest waiting block, if any (each handed-out block spawns one
    // call; the reader makes more when too many wait).
    let run_one = || {
        let Some(job) = queue.lock().expect("block queue lock").pop_front() else {
            return;
        };
        if failed.load(Ordering::Relaxed) {
            return;
        }
        let r = work(&job.block, &job.samples);
        if r.is_err() {
            failed.store(true, Ordering::Relaxed);
        }
        let end = job.block.i0 + job.block.n;
        let c = covered.fetch_max(end, Ordering::Relaxed).max(end);
        progress(c as f64 / len.max(1) as f64);
        results
            .lock()
            .expect("block results lock")
            .push((job.index, r));
        spare.lock().expect("spare lock").push(job.samples);
    };
    let run_one = &run_one;
    let max_waiting = rayon::current_num_threads() + 1;
    let read = rayon::scope(|scope| {
        let hand_out = |job: Job| {
            let mut q = queue.lock().expect("block queue lock");
            q.push_back(job);
            let waiting = q.len();
            drop(q);
            scope.spawn(move |_| run_one());
            for _ in max_waiting..waiting {
                run_one();
            }
        };
        let mut reader = Reader::new(src, grid, segments, &spare);
        let read = (|| -> Result<Option<Reader>> {
            while reader.pos < len {
                if failed.load(Ordering::Relaxed) {
                    return Ok(None);
                }
                reader.read_chunk()?;
                for job in reader.certain_blocks()? {
                    hand_out(job);
                }
            }
            for job in reader.last_blocks()? {
                hand_out(job);
            }
            Ok(Some(reader))
        })();
        if read.is_err() {
            failed.store(true, Ordering::Relaxed);
        }
        read
    })?;
    let mut results = results.into_inner().expect("block results lock");
    results.sort_by_key(|r| r.0);
    let mut done = Vec::with_capacity(results.len());
    for (_, r) in results {
        done.push(r?);
    }
    let Some(reader) = read else {
        bail!("internal: a block failed without an error");
    };
    if done.len() != reader.handed.len() {
        bail!(
            "internal: {} of {} blocks were processed",
            done.len(),
            reader.handed.len()
        );
    }
    progress(1.0);
    Ok(Streamed {
        blocks: reader.handed.into_iter().zip(done).collect(),
        any_finite: reader.any_finite,
        longest: reader.longest,
        checksum: format!("{:032x}", reader.hasher.digest128()),
    })
}

/// The reader: samples read so far, their runs and checksum, the chunks
/// blocks may still need, and the blocks handed out.
struct Reader<'a> {
    src: &'a dyn SampleSource,
    grid: &'a Grid,
    segments: Option<&'a SegmentList>,
    /// Samples `[0, pos)` are read.
    pos: usize,
    runs: FiniteRuns,
    /// Closed runs before this index have all their blocks handed out.
    runs_done: usize,
    hasher: xxhash_rust::xxh3::Xxh3,
    bytes: Vec<u8>,
    ring: Ring,
    /// Sample buffers of blocks done.
    spare: &'a Mutex<Vec<Vec<f64>>>,
    /// Blocks handed out, in order.
    handed: Vec<Block>,
    any_finite: bool,
    longest: f64,
}

impl<'a> Reader<'a> {
    fn new(
        src: &'a dyn SampleSource,
        grid: &'a Grid,
        segments: Option<&'a SegmentList>,
        spare: &'a Mutex<Vec<Vec<f64>>>,
    ) -> Self {
        Reader {
            src,
            grid,
            segments,
            pos: 0,
            runs: FiniteRuns::default(),
            runs_done: 0,
            hasher: xxhash_rust::xxh3::Xxh3::new(),
            bytes: Vec::new(),
            ring: Ring::default(),
            spare,
            handed: Vec::new(),
            any_finite: false,
            longest: 0.0,
        }
    }

    /// Read the next chunk: check and hash it, and keep it.
    fn read_chunk(&mut self) -> Result<()> {
        let n = STREAM_CHUNK_SAMPLES.min(self.src.len() - self.pos);
        let mut chunk = self.ring.take_buffer(n);
        self.src.read(self.pos, &mut chunk)?;
        super::hash_samples(&mut self.hasher, &mut self.bytes, &chunk);
        self.runs.feed(self.pos, &chunk);
        self.ring.chunks.push_back((self.pos, chunk));
        self.pos += n;
        Ok(())
    }

    /// The blocks not yet handed out whose place the samples read so far
    /// settle (see the module header); drops the chunks no later block
    /// needs.
    fn certain_blocks(&mut self) -> Result<Vec<Job>> {
        let (grid, pos) = (self.grid, self.pos);
        let known = grid.end_index(grid.time(pos), pos);
        let closed = self.runs.closed();
        let mut runs = closed[self.runs_done..].to_vec();
        if let Some(s) = self.runs.open_start() {
            runs.push((s, pos));
        }
        // Closed runs whose stretches all end before `known` are done.
        while self.runs_done < closed.len()
            && grid.end_index(grid.time(closed[self.runs_done].1), pos) < known
        {
            self.runs_done += 1;
        }
        let last_end = self.handed.last().map_or(0, |b| b.i0 + b.n);
        let mut jobs = Vec::new();
        for b in layout(&runs, pos, grid, self.segments).0 {
            let end = b.i0 + b.n;
            if end > last_end && end < known {
                jobs.push(self.job(b)?);
            }
        }
        // Blocks not handed out end at `known` or later.
        self.ring.drop_before(known.saturating_sub(grid.block_n));
        Ok(jobs)
    }

    /// With every sample read: the layout of the whole series, checked
    /// against the blocks handed out, and the rest of its blocks.
    fn last_blocks(&mut self) -> Result<Vec<Job>> {
        let len = self.src.len();
        let runs = std::mem::take(&mut self.runs).finish(len);
        self.any_finite = !runs.is_empty();
        let (blocks, longest) = layout(&runs, len, self.grid, self.segments);
        self.longest = longest;
        if blocks.get(..self.handed.len()) != Some(&self.handed[..]) {
            bail!(
                "{}: internal: the blocks handed out while reading differ from the layout",
                self.src.describe()
            );
        }
        let rest = blocks[self.handed.len()..].to_vec();
        rest.into_iter().map(|b| self.job(b)).collect()
    }

    /// Hand out `block` with its samples (from the kept chunks; read again
    /// only if they are not all there, which the layout rules out).
    fn job(&mut self, block: Block) -> Result<Job> {
        let mut samples = self
            .spare
            .lock()
            .expect("spare lock")
            .pop()
            .unwrap_or_default();
        samples.resize(block.n, 0.0);
        if !self.ring.copy_to(block.i0, &mut samples) {
            self.src.read(block.i0, &mut samples).map_err(|e| {
                anyhow!(
                    "{e} (re-reading samples {}..{} for a block)",
                    block.i0,
                    block.i0 + block.n
                )
            })?;
        }
        self.handed.push(block);
        Ok(Job {
            index: self.handed.len() - 1,
            block,
            samples,
        })
    }
}

/// Chunks of samples read, in order and contiguous, as `(first index,
/// samples)`.
#[derive(Default)]
struct Ring {
    chunks: VecDeque<(usize, Vec<f64>)>,
    /// A dropped chunk's buffer, for the next read.
    spare: Option<Vec<f64>>,
}

impl Ring {
    fn take_buffer(&mut self, n: usize) -> Vec<f64> {
        let mut b = self.spare.take().unwrap_or_default();
        b.resize(n, 0.0);
        b
    }

    /// Copy samples `[i0, i0 + out.len())`; false when some are not held.
    fn copy_to(&self, i0: usize, out: &mut [f64]) -> bool {
        let end = i0 + out.len();
        let mut at = i0;
        for (first, c) in &self.chunks {
            if at == end || *first > at {
                break;
            }
            let b = c.len().min(end - first);
            if at - first < b {
                let a = at - first;
                out[at - i0..at - i0 + b - a].copy_from_slice(&c[a..b]);
                at += b - a;
            }
        }
        at == end
    }

    /// Drop the chunks that end at or before sample `i`.
    fn drop_before(&mut self, i: usize) {
        while let Some((first, c)) = self.chunks.front() {
            if first + c.len() > i {
                break;
            }
            if let Some((_, c)) = self.chunks.pop_front() {
                self.spare = Some(c);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scan::InMemory;

    /// A source that counts the samples read from it.
    struct Counted(InMemory, AtomicUsize);

    impl SampleSource for Counted {
        fn rate_hz(&self) -> f64 {
            self.0.rate_hz
        }
        fn start_gps(&self) -> f64 {
            self.0.start_gps
        }
        fn len(&self) -> usize {
            self.0.data.len()
        }
        fn read(&self, start: usize, out: &mut [f64]) -> Result<()> {
            self.1.fetch_add(out.len(), Ordering::Relaxed);
            self.0.read(start, out)
        }
        fn describe(&self) -> String {
            "counted".into()
        }
    }

    /// Every block gets the samples a read of the source gives, the blocks
    /// are those the whole series' runs lay (dropouts at and near chunk
    /// edges, analysis segments, stretches shorter than a block), and the
    /// checksum is the survey's; with one thread and with several. Every
    /// sample is read once.
    #[test]
    fn streamed_blocks_match_the_whole_series_layout() {
        let n = 5 * STREAM_CHUNK_SAMPLES + 12_345;
        let mut data: Vec<f64> = (0..n).map(|i| ((i * 7919) % 1000) as f64).collect();
        let c = STREAM_CHUNK_SAMPLES;
        for i in [c - 1, c, 2 * c + 17, 2 * c + 18, 3 * c + 40_000, n - 3] {
            data[i] = f64::NAN;
        }
        // A long stretch of dropouts and a short run inside it.
        for x in &mut data[4 * c..4 * c + 100_000] {
            *x = f64::INFINITY;
        }
        data[4 * c + 50_000..4 * c + 53_000].fill(1.0);
        let src = Counted(
            InMemory {
                data,
                rate_hz: 256.0,
                start_gps: 1_400_000_000.0,
            },
            AtomicUsize::new(0),
        );
        let grid = Grid {
            t0: src.start_gps(),
            fs: src.rate_hz(),
            block_n: 16_384,
            pad: 1024,
            min_len: 4096,
        };
        let t = |i: usize| src.start_gps() + i as f64 / src.rate_hz();
        let segs = SegmentList::from_segments(vec![
            Segment::new(t(1000), t(c + 5000)),
            Segment::new(t(c + 9000), t(c + 9000 + 20_000)),
            Segment::new(t(2 * c), t(n)),
        ]);
        let (_, checksum) = src.survey().unwrap();
        for segments in [None, Some(&segs)] {
            let mut runs = FiniteRuns::default();
            runs.feed(0, &src.0.data);
            let (want, _) = layout(&runs.finish(n), n, &grid, segments);
            assert!(want.len() > 20, "{} blocks", want.len());
            for threads in [1, 3] {
                let pool = rayon::ThreadPoolBuilder::new()
                    .num_threads(threads)
                    .build()
                    .unwrap();
                let work = |b: &Block, x: &[f64]| -> Result<bool> {
                    Ok(x == &src.0.data[b.i0..b.i0 + b.n])
                };
                src.1.store(0, Ordering::Relaxed);
                let got = pool
                    .install(|| stream_blocks(&src, &grid, segments, &work, &|_| {}))
                    .unwrap();
                let blocks: Vec<Block> = got.blocks.iter().map(|b| b.0).collect();
                assert_eq!(blocks, want, "{threads} threads");
                assert!(got.blocks.iter().all(|b| b.1), "samples of every block");
                assert_eq!(got.checksum, checksum);
                assert!(got.any_finite);
                assert_eq!(src.1.load(Ordering::Relaxed), n, "samples read");
            }
        }
    }

    /// A block's error is the stream's, and reading stops.
    #[test]
    fn a_failing_block_fails_the_stream() {
        let src = InMemory {
            data: vec![1.0; 3 * STREAM_CHUNK_SAMPLES],
            rate_hz: 256.0,
            start_gps: 0.0,
        };
        let grid = Grid {
            t0: 0.0,
            fs: 256.0,
            block_n: 8192,
            pad: 512,
            min_len: 2048,
        };
        let work = |b: &Block, _: &[f64]| -> Result<()> {
            if b.i0 > 100_000 {
                bail!("block at {}", b.i0);
            }
            Ok(())
        };
        let e = stream_blocks(&src, &grid, None, &work, &|_| {})
            .err()
            .expect("an error");
        assert!(e.to_string().starts_with("block at "), "{e}");
    }

    #[test]
    fn ring_copies_across_chunks_and_refuses_what_it_dropped() {
        let mut r = Ring::default();
        for k in 0..3 {
            let mut c = r.take_buffer(4);
            for (j, x) in c.iter_mut().enumerate() {
                *x = (4 * k + j) as f64;
            }
            r.chunks.push_back((4 * k, c));
        }
        let mut out = [0.0; 6];
        assert!(r.copy_to(3, &mut out));
        assert_eq!(out, [3.0, 4.0, 5.0, 6.0, 7.0, 8.0]);
        assert!(!r.copy_to(10, &mut out), "past the end");
        r.drop_before(5);
        assert_eq!(r.chunks.front().map(|c| c.0), Some(4));
        assert!(!r.copy_to(3, &mut out), "dropped");
        assert!(r.copy_to(4, &mut out[..0]));
    }
}
