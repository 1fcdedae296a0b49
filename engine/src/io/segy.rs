//! SEG-Y volumes (SEG Technical Standards Committee: SEG-Y rev 1, 2002; SEG-Y rev 2.0, 2017):
//! the reader of azimuth-sector volumes, trace by trace and window by window, their traces
//! placed on the exact bin lattice of the point reader, and a small writer for test fixtures
//! and demo data.
//!
//! File layout (byte positions 1-based as in the standard; `../shared/REFERENCES.md` section
//! "SEG-Y", checked against segyio 1.9.14 by `engine/tests/segy_reference.rs`): a 3200-byte
//! textual header (EBCDIC or ASCII, told apart by which decoding yields more letters, digits
//! and spaces), a 400-byte binary header, `n` 3200-byte extended textual headers (`n` at bytes
//! 3505-3506), then traces of a 240-byte header and their samples.
//! - Binary header: sample interval (µs) 3217-3218, samples per trace 3221-3222 (in rev 2
//!   overridden by the 4-byte count at 3269-3272 when that is non-zero), sample format code
//!   3225-3226, byte-order constant 16909060 at 3297-3300 (rev 2), revision 3501-3502 (a
//!   16-bit field in the file's byte order, major in its high byte, as segyio reads it; a
//!   field of 0x00nn is read as revision n), fixed-length flag 3503-3504.
//! - Byte order: from the rev 2 constant when it reads 0x01020304 (big-endian) or 0x04030201
//!   (little-endian); otherwise big-endian unless only the little-endian reading of the format
//!   code is a SEG-Y format code.
//! - Sample formats read and written: 1 (4-byte IBM System/360 float), 2 (4-byte two's
//!   complement integer), 3 (2-byte integer), 5 (4-byte IEEE float), 8 (1-byte integer).
//!   Samples are returned as `f32`; integers beyond 2^24 in magnitude round to the nearest
//!   `f32`.
//! - Trace header: coordinate scalar 71-72 (positive multiplies, negative divides by its
//!   absolute value, 0 means 1), delay recording time 109-110 (ms: the time of the first
//!   sample, which may be non-zero but must be the same on every trace; as in segyio, the rev 1
//!   time scalar at 215-216 is not applied, and a trace with a delay and a time scalar other
//!   than 0 or 1 is refused), samples 115-116 and interval 117-118 (each must equal the binary
//!   header's, or be 0 for "not recorded"), coordinate units 89-90 (2, 3 and 4, arc seconds
//!   and degrees, are refused), CDP x 181-184, CDP y 185-188, inline 189-192, crossline
//!   193-196. Inline, crossline, x, y and the scalar can be read from other positions
//!   ([`SegyHeaderBytes`]), as files in the field often put them elsewhere; x and y are 4-byte
//!   integers.
//! - Traces are of one length (`240 + samples x bytes per sample`); the file size must be the
//!   headers plus a whole number of traces, else the file is refused as truncated at its last
//!   byte or as holding trailing bytes.
//!
//! Reading: [`SegyVolume::open`] reads the file headers and every trace header once (seeking
//! from header to header, never reading samples) into a table of inline, crossline and scaled
//! x, y per trace (32 bytes a trace); [`SegyVolume::read_samples`] reads one window of one
//! trace with one seek and one read on the volume's open file, so memory is bounded by the
//! trace table and the caller's windows, never by the volume. [`SegyVolume::lattice`] places
//! the traces on their bin lattice with the point reader's inline/crossline placement
//! ([`place_numbered`]), and [`SegyVolume::traces_on`] matches that lattice to a horizon grid
//! ([`GridGeometry::cell_map`]).
//!
//! IBM System/360 hexadecimal floating point (IBM, *IBM System/360 Principles of Operation*,
//! 1964; `../shared/REFERENCES.md` "SEG-Y"): sign bit, 7-bit base-16 exponent in excess 64,
//! 24-bit fraction, value `(-1)^s x 0.f x 16^(e - 64)`. See [`ibm_to_f32`] and [`f32_to_ibm`].
//!
//! Why not a SEG-Y crate: `giga-segy-in` 0.5.0 (MIT/Apache-2.0, builds here with rustc 1.95)
//! was tried on files written by segyio 1.9.14 and by this module (measured). It memory-maps
//! the file and keeps a parsed 296-byte header per trace plus a hash map (32 bytes a trace
//! here); it reads a whole trace or a single sample, not a window. A 600-trace file cut 600
//! bytes short opened as 599 traces without an error, and with 1000 zero bytes appended as
//! 604 traces; with trace headers that leave the sample count at 0 it listed 454 of 600
//! traces without an error. It takes the byte-order constant written big-endian (bytes 01 02
//! 03 04 at 3297-3300) for little-endian, so a big-endian rev 2 file failed with "Could not
//! parse source (1280) to SampleFormatCode"; and it reads the extended textual header count
//! from bytes 3507-3510 instead of 3505-3506, so `int16_custom_bytes.sgy` (one extended
//! header, 20 traces) opened as 31 traces with wrong samples. The refusals this module owes
//! its users (truncation at a byte, sample counts that disagree) are not available through it.

use super::points::{place_numbered, Naming, NodePlacement, NumberedNodes};
use super::StagedFile;
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use ndarray::Array2;
use std::fs::File;
use std::io::{BufReader, BufWriter, Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

/// Bytes of the textual header (and of each extended textual header).
pub const TEXT_HEADER_BYTES: usize = 3200;
/// Bytes of the binary header.
pub const BINARY_HEADER_BYTES: usize = 400;
/// Bytes of a trace header.
pub const TRACE_HEADER_BYTES: usize = 240;
/// Bytes before the first extended textual header (or trace).
const FILE_HEADER_BYTES: usize = TEXT_HEADER_BYTES + BINARY_HEADER_BYTES;

/// Entry of a horizon cell without a trace in [`SegyVolume::traces_on`].
pub const NO_TRACE: u32 = u32::MAX;

/// Where the trace header keeps the fields that place a trace: 1-based byte positions within
/// the 240-byte trace header, as the standard numbers them. Inline, crossline, x and y are
/// 4-byte integers, the coordinate scalar a 2-byte integer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SegyHeaderBytes {
    /// Inline number (standard: 189).
    pub inline: usize,
    /// Crossline number (standard: 193).
    pub crossline: usize,
    /// CDP x, map x in CRS units times the coordinate scalar (standard: 181).
    pub x: usize,
    /// CDP y (standard: 185).
    pub y: usize,
    /// Coordinate scalar (standard: 71): positive multiplies x and y, negative divides them by
    /// its absolute value, 0 leaves them as they are.
    pub scalar: usize,
}

impl Default for SegyHeaderBytes {
    /// The positions of SEG-Y rev 1 and 2: 189, 193, 181, 185 and 71.
    fn default() -> Self {
        Self {
            inline: 189,
            crossline: 193,
            x: 181,
            y: 185,
            scalar: 71,
        }
    }
}

/// Trace header fields the reader needs where the standard puts them: (first byte, length,
/// name); the placing fields may not overlap them.
const FIXED_FIELDS: [(usize, usize, &str); 3] = [
    (109, 2, "delay recording time"),
    (115, 2, "samples"),
    (117, 2, "sample interval"),
];

impl SegyHeaderBytes {
    /// The fields as (first byte, length, name).
    fn fields(&self) -> [(usize, usize, &'static str); 5] {
        [
            (self.inline, 4, "inline"),
            (self.crossline, 4, "crossline"),
            (self.x, 4, "x"),
            (self.y, 4, "y"),
            (self.scalar, 2, "coordinate scalar"),
        ]
    }

    /// Refuses a position outside the 240-byte header, or fields that overlap each other or
    /// the delay, sample count and interval fields.
    pub fn check(&self) -> Result<()> {
        let fields = self.fields();
        for &(at, len, name) in &fields {
            if at == 0 || at > TRACE_HEADER_BYTES + 1 - len {
                return Err(FlexureError::Parameter(format!(
                    "the {name} byte position {at} is outside the trace header: give a 1-based position from 1 to {} for this {len}-byte field",
                    TRACE_HEADER_BYTES + 1 - len
                )));
            }
        }
        let overlap = |a: (usize, usize), b: (usize, usize)| a.0 < b.0 + b.1 && b.0 < a.0 + a.1;
        for (i, &(at, len, name)) in fields.iter().enumerate() {
            let others = fields[i + 1..].iter().chain(FIXED_FIELDS.iter());
            if let Some(&(o_at, o_len, other)) =
                others.into_iter().find(|o| overlap((at, len), (o.0, o.1)))
            {
                return Err(FlexureError::Parameter(format!(
                    "the {name} field (trace header bytes {at}-{}) overlaps the {other} field (bytes {o_at}-{}): give separate byte positions",
                    at + len - 1,
                    o_at + o_len - 1
                )));
            }
        }
        Ok(())
    }

    /// The positions in words, for messages.
    pub fn describe(&self) -> String {
        format!(
            "inline at trace header byte {}, crossline at {}, x at {}, y at {}, coordinate scalar at {}",
            self.inline, self.crossline, self.x, self.y, self.scalar
        )
    }
}

/// Sample formats read and written (binary header bytes 3225-3226).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SampleFormat {
    /// Code 1: 4-byte IBM System/360 hexadecimal float.
    Ibm,
    /// Code 2: 4-byte two's complement integer.
    Int32,
    /// Code 3: 2-byte two's complement integer.
    Int16,
    /// Code 5: 4-byte IEEE 754 float.
    Ieee,
    /// Code 8: 1-byte two's complement integer.
    Int8,
}

impl SampleFormat {
    /// The format of a SEG-Y format code, if it is one of these.
    pub fn from_code(code: u16) -> Option<Self> {
        match code {
            1 => Some(Self::Ibm),
            2 => Some(Self::Int32),
            3 => Some(Self::Int16),
            5 => Some(Self::Ieee),
            8 => Some(Self::Int8),
            _ => None,
        }
    }

    /// The SEG-Y format code.
    pub fn code(self) -> u16 {
        match self {
            Self::Ibm => 1,
            Self::Int32 => 2,
            Self::Int16 => 3,
            Self::Ieee => 5,
            Self::Int8 => 8,
        }
    }

    /// Bytes per sample.
    pub fn bytes(self) -> usize {
        match self {
            Self::Ibm | Self::Int32 | Self::Ieee => 4,
            Self::Int16 => 2,
            Self::Int8 => 1,
        }
    }

    /// The values an integer format holds, `lo <= v < hi` (`None` for floats).
    fn integer_range(self) -> Option<(f32, f32)> {
        let bits = match self {
            Self::Int32 => 31,
            Self::Int16 => 15,
            Self::Int8 => 7,
            Self::Ibm | Self::Ieee => return None,
        };
        let hi = 2f32.powi(bits);
        Some((-hi, hi))
    }
}

/// What the SEG-Y format codes 1 to 16 are (rev 2), for messages; `None` for other codes.
fn format_name(code: u16) -> Option<&'static str> {
    Some(match code {
        1 => "4-byte IBM float",
        2 => "4-byte integer",
        3 => "2-byte integer",
        4 => "4-byte fixed point with gain",
        5 => "4-byte IEEE float",
        6 => "8-byte IEEE float",
        7 => "3-byte integer",
        8 => "1-byte integer",
        9 => "8-byte integer",
        10 => "4-byte unsigned integer",
        11 => "2-byte unsigned integer",
        12 => "8-byte unsigned integer",
        15 => "3-byte unsigned integer",
        16 => "1-byte unsigned integer",
        _ => return None,
    })
}

/// Byte order of the binary header, trace headers and samples.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ByteOrder {
    /// Most significant byte first (the standard's order).
    Big,
    /// Least significant byte first (rev 2, declared by the byte-order constant).
    Little,
}

/// Encoding of the textual header.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TextEncoding {
    /// EBCDIC (code page 037).
    Ebcdic,
    /// ASCII.
    Ascii,
}

/// The file-level facts of a SEG-Y volume.
#[derive(Clone, Debug, PartialEq)]
pub struct SegyInfo {
    /// SEG-Y revision (major, minor) from bytes 3501-3502 ((0, 0) in files before rev 1; see
    /// the module documentation).
    pub revision: (u8, u8),
    /// Byte order of the headers and samples.
    pub byte_order: ByteOrder,
    /// Sample format.
    pub format: SampleFormat,
    /// Encoding of the textual header.
    pub text_encoding: TextEncoding,
    /// The 3200-byte textual header decoded (code page 037 for EBCDIC; ASCII and EBCDIC bytes
    /// beyond ASCII as Latin-1).
    pub text: String,
    /// Number of extended textual headers.
    pub extended_headers: usize,
    /// The fixed-length-trace flag (bytes 3503-3504) is set.
    pub fixed_length: bool,
    /// Sample interval, microseconds.
    pub sample_interval_us: u32,
    /// Samples per trace.
    pub samples: usize,
    /// Time of the first sample (delay recording time), milliseconds.
    pub delay_ms: i32,
    /// Number of traces.
    pub traces: usize,
    /// Byte offset (0-based) of the first trace header.
    pub data_start: u64,
}

impl SegyInfo {
    /// Bytes per trace, header included.
    pub fn trace_bytes(&self) -> u64 {
        (TRACE_HEADER_BYTES + self.samples * self.format.bytes()) as u64
    }
}

/// Where one trace lies: its inline and crossline numbers and its map coordinates (CRS units,
/// the coordinate scalar applied).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TraceLocation {
    /// Inline number.
    pub inline: i64,
    /// Crossline number.
    pub crossline: i64,
    /// Map x (grid east), CRS units.
    pub x: f64,
    /// Map y (grid north), CRS units.
    pub y: f64,
}

/// An open SEG-Y volume: its file-level facts, the location of every trace, and the open file
/// its samples are read from window by window.
#[derive(Debug)]
pub struct SegyVolume {
    path: PathBuf,
    file: File,
    info: SegyInfo,
    header_bytes: SegyHeaderBytes,
    nodes: NumberedNodes,
    /// Bytes of the last window read.
    scratch: Vec<u8>,
}

/// The naming of lattice messages about SEG-Y traces.
const TRACES: Naming = Naming {
    record: "trace",
    points: "traces",
    coordinates: "trace header fields",
    check: "the trace header byte positions of inline, crossline, x and y",
    remedy: "check the trace header byte positions of inline, crossline, x and y",
    tolerance_option: "--trace-tolerance",
    makes: "a volume",
};

/// Reads a big- or little-endian integer of `N` bytes at 0-based `at` of `b`.
fn bytes_at<const N: usize>(b: &[u8], at: usize) -> [u8; N] {
    let mut out = [0; N];
    out.copy_from_slice(&b[at..at + N]);
    out
}

impl ByteOrder {
    fn u16(self, b: &[u8], at: usize) -> u16 {
        match self {
            Self::Big => u16::from_be_bytes(bytes_at(b, at)),
            Self::Little => u16::from_le_bytes(bytes_at(b, at)),
        }
    }

    fn i16(self, b: &[u8], at: usize) -> i16 {
        self.u16(b, at) as i16
    }

    fn u32(self, b: &[u8], at: usize) -> u32 {
        match self {
            Self::Big => u32::from_be_bytes(bytes_at(b, at)),
            Self::Little => u32::from_le_bytes(bytes_at(b, at)),
        }
    }

    fn i32(self, b: &[u8], at: usize) -> i32 {
        self.u32(b, at) as i32
    }

    fn put_u16(self, b: &mut [u8], at: usize, v: u16) {
        let bytes = match self {
            Self::Big => v.to_be_bytes(),
            Self::Little => v.to_le_bytes(),
        };
        b[at..at + 2].copy_from_slice(&bytes);
    }

    fn put_u32(self, b: &mut [u8], at: usize, v: u32) {
        let bytes = match self {
            Self::Big => v.to_be_bytes(),
            Self::Little => v.to_le_bytes(),
        };
        b[at..at + 4].copy_from_slice(&bytes);
    }
}

/// A stored coordinate with a SEG-Y coordinate scalar applied (SEG-Y rev 1, trace header
/// bytes 71-72): positive multiplies, negative divides by its absolute value (dividing, so
/// -100 gives the nearest double to `v / 100`), 0 leaves it.
fn scaled(v: i32, scalar: i16) -> f64 {
    match scalar {
        s if s < 0 => v as f64 / -(s as f64),
        s if s > 0 => v as f64 * s as f64,
        _ => v as f64,
    }
}

/// The inverse of [`scaled`] before rounding to the stored integer.
fn unscaled(v: f64, scalar: i16) -> f64 {
    match scalar {
        s if s < 0 => v * -(s as f64),
        s if s > 0 => v / s as f64,
        _ => v,
    }
}

impl SegyVolume {
    /// Opens the SEG-Y file at `path`: reads the textual and binary headers and every trace
    /// header (see the module documentation for the fields and checks), placing fields at
    /// `header_bytes`. Errors (one line naming the file, and the byte or trace where there is
    /// one): not SEG-Y or truncated, an unsupported sample format, revision or byte order,
    /// trailing bytes, a trace whose sample count, interval or delay disagree with the file's,
    /// geographic coordinates.
    pub fn open(path: &Path, header_bytes: &SegyHeaderBytes) -> Result<SegyVolume> {
        header_bytes.check()?;
        let fail = |reason: String| FlexureError::input(path, reason);
        let file = File::open(path).map_err(|e| fail(format!("cannot open: {e}")))?;
        let len = file
            .metadata()
            .map_err(|e| fail(format!("cannot read: {e}")))?
            .len();
        let mut reader = BufReader::with_capacity(1 << 16, file);
        let mut head = vec![0u8; FILE_HEADER_BYTES];
        if len < FILE_HEADER_BYTES as u64 {
            return Err(fail(format!(
                "is not SEG-Y or is truncated: it ends at byte {len}, inside the {FILE_HEADER_BYTES}-byte file header (3200-byte textual and 400-byte binary header)"
            )));
        }
        reader
            .read_exact(&mut head)
            .map_err(|e| fail(format!("cannot read the file header: {e}")))?;
        let header = FileHeader::parse(&head).map_err(&fail)?;
        let data_start = (FILE_HEADER_BYTES + header.extended * TEXT_HEADER_BYTES) as u64;
        if len < data_start {
            return Err(fail(format!(
                "is truncated: it ends at byte {len}, inside the {} extended textual header(s) that end at byte {data_start} (binary header bytes 3505-3506)",
                header.extended
            )));
        }
        let mut scan = Scan {
            reader,
            position: FILE_HEADER_BYTES as u64,
            order: header.order,
            header: [0; TRACE_HEADER_BYTES],
        };
        let first = match len >= data_start + TRACE_HEADER_BYTES as u64 {
            true => Some(scan.header_at(data_start).map_err(&fail)?),
            false => None,
        };
        let (samples, interval) = header.sampling(first.as_ref()).map_err(&fail)?;
        let mut info = SegyInfo {
            revision: header.revision,
            byte_order: header.order,
            format: header.format,
            text_encoding: header.text_encoding,
            text: header.text,
            extended_headers: header.extended,
            fixed_length: header.fixed_length,
            sample_interval_us: interval,
            samples,
            delay_ms: 0,
            traces: 0,
            data_start,
        };
        let trace_bytes = info.trace_bytes();
        let whole = (len - data_start) / trace_bytes;
        let rest = (len - data_start) % trace_bytes;
        if whole == 0 && rest == 0 {
            return Err(fail(format!(
                "holds no traces: it ends with its headers at byte {len}"
            )));
        }
        let traces = usize::try_from(whole)
            .ok()
            .filter(|&n| n < u32::MAX as usize)
            .ok_or_else(|| fail(format!("holds {whole} traces, more than flexure reads")))?;
        info.traces = traces;
        let nodes = scan.traces(&mut info, header_bytes).map_err(&fail)?;
        if rest > 0 {
            return Err(fail(scan.rest(&info, len, rest)));
        }
        Ok(SegyVolume {
            path: path.to_path_buf(),
            file: scan.reader.into_inner(),
            info,
            header_bytes: *header_bytes,
            nodes,
            scratch: Vec::new(),
        })
    }

    /// The file read.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The file-level facts.
    pub fn info(&self) -> &SegyInfo {
        &self.info
    }

    /// Sample interval, milliseconds.
    pub fn sample_interval_ms(&self) -> f64 {
        self.info.sample_interval_us as f64 / 1000.0
    }

    /// Samples per trace.
    pub fn samples(&self) -> usize {
        self.info.samples
    }

    /// Time of the first sample of every trace (the delay recording time), milliseconds;
    /// sample `k` is at `first_time_ms() + k sample_interval_ms()`.
    pub fn first_time_ms(&self) -> f64 {
        self.info.delay_ms as f64
    }

    /// Number of traces.
    pub fn traces(&self) -> usize {
        self.info.traces
    }

    /// Inline, crossline and map position of trace `trace` (0-based, file order); `None`
    /// for no such trace, or once [`SegyVolume::forget_locations`] was called.
    pub fn trace(&self, trace: usize) -> Option<TraceLocation> {
        Some(TraceLocation {
            inline: *self.nodes.inline.get(trace)?,
            crossline: *self.nodes.crossline.get(trace)?,
            x: *self.nodes.x.get(trace)?,
            y: *self.nodes.y.get(trace)?,
        })
    }

    /// Lets go of the table of trace locations (32 bytes a trace) once the traces are placed
    /// ([`SegyVolume::traces_on`]), so a job holding many volumes open keeps only their
    /// files; [`SegyVolume::lattice`] and [`SegyVolume::trace`] then find no traces.
    pub fn forget_locations(&mut self) {
        self.nodes = NumberedNodes::default();
    }

    /// Reads samples `first_sample..first_sample + out.len()` of trace `trace` (0-based, file
    /// order) into `out`, converted from the file's format to `f32`, with one seek and one
    /// read. Errors: no such trace, a window reaching beyond the trace (naming both in samples
    /// and milliseconds), a read failure (the file changed since it was opened).
    pub fn read_samples(
        &mut self,
        trace: usize,
        first_sample: usize,
        out: &mut [f32],
    ) -> Result<()> {
        let info = &self.info;
        let fail = |reason: String| FlexureError::input(&self.path, reason);
        if trace >= info.traces {
            return Err(fail(format!(
                "has {} traces, no trace {}",
                info.traces,
                trace + 1
            )));
        }
        let end = first_sample.saturating_add(out.len());
        if end > info.samples {
            let t = |k: usize| self.first_time_ms() + k as f64 * self.sample_interval_ms();
            return Err(fail(format!(
                "a window of samples {first_sample}..{end} ({} to {} ms) reaches beyond the traces, which hold samples 0..{} ({} to {} ms): shorten the window or move it inside the traces",
                t(first_sample),
                t(end - 1),
                info.samples,
                t(0),
                t(info.samples - 1),
            )));
        }
        let bytes = info.format.bytes();
        let at = info.data_start
            + trace as u64 * info.trace_bytes()
            + (TRACE_HEADER_BYTES + first_sample * bytes) as u64;
        self.scratch.resize(out.len() * bytes, 0);
        let read = self
            .file
            .seek(SeekFrom::Start(at))
            .and_then(|_| self.file.read_exact(&mut self.scratch));
        if let Err(e) = read {
            return Err(FlexureError::input(
                &self.path,
                format!(
                    "cannot read trace {} at byte {}: {e} (did the file change after it was opened?)",
                    trace + 1,
                    at + 1
                ),
            ));
        }
        decode(info.format, info.byte_order, &self.scratch, out);
        Ok(())
    }

    /// Places the traces on their bin lattice from their inline/crossline numbers and x, y
    /// ([`place_numbered`]; `tolerance` as `--trace-tolerance`, a share of the smaller
    /// bin). Errors name the file, the trace, and the header byte positions read, since a
    /// lattice that cannot be found most often means the fields are elsewhere in this file.
    pub fn lattice(&self, tolerance: f64) -> Result<NodePlacement> {
        place_numbered(self.nodes.clone(), tolerance, TRACES).map_err(|reason| {
            FlexureError::input(
                &self.path,
                format!(
                    "{reason} (trace headers read with {}: give the byte positions if this file keeps them elsewhere)",
                    self.header_bytes.describe()
                ),
            )
        })
    }

    /// The trace at each cell of a horizon grid, `[row, col]` of the horizon, [`NO_TRACE`]
    /// where the volume has none: the volume's lattice (`placement`, from
    /// [`SegyVolume::lattice`]) must be the horizon's, up to the order and direction of the
    /// axes, over any part of it ([`GridGeometry::cell_map`]; the volume's coordinates are
    /// taken in the horizon's CRS, SEG-Y declaring none reliably) to within `tolerance` of a
    /// bin (the lattice tolerance: the volume's lattice is fitted to coordinates rounded as
    /// the coordinate scalar allows). Errors name both files and the difference; a volume with
    /// no trace inside the horizon is refused.
    pub fn traces_on(
        &self,
        placement: &NodePlacement,
        horizon_path: &Path,
        horizon: &GridGeometry,
        tolerance: f64,
    ) -> Result<Array2<u32>> {
        let volume = placement.geometry(horizon.crs_wkt.clone(), horizon.metres_per_unit);
        let map = volume.cell_map(horizon, tolerance).map_err(|why| {
            FlexureError::input(
                &self.path,
                format!(
                    "lies on another lattice than the horizon {}: {why} (volume: {}; horizon: {})",
                    horizon_path.display(),
                    volume.describe(),
                    horizon.describe()
                ),
            )
        })?;
        let mut traces = Array2::from_elem((horizon.rows, horizon.cols), NO_TRACE);
        let mut inside = 0usize;
        for (k, &(c, r)) in placement.index.iter().enumerate() {
            if let Some((hc, hr)) = map.cell(c, r) {
                traces[[hr, hc]] = k as u32;
                inside += 1;
            }
        }
        if inside == 0 {
            return Err(FlexureError::input(
                &self.path,
                format!(
                    "lies on the lattice of the horizon {} but none of its traces is inside it: give the volume of the horizon's area",
                    horizon_path.display()
                ),
            ));
        }
        Ok(traces)
    }

    /// Refuses `other` when its sampling differs from this volume's (interval, number of
    /// samples, time of the first sample), naming both files: sector volumes must share one
    /// time axis.
    pub fn check_same_sampling(&self, other: &SegyVolume) -> Result<()> {
        let axis = |v: &SegyVolume| (v.info.sample_interval_us, v.info.samples, v.info.delay_ms);
        if axis(self) == axis(other) {
            return Ok(());
        }
        let describe = |v: &SegyVolume| {
            format!(
                "{} samples of {} ms from {} ms",
                v.samples(),
                v.sample_interval_ms(),
                v.first_time_ms()
            )
        };
        Err(FlexureError::input(
            &other.path,
            format!(
                "has {} but {} has {}: sector volumes must share one sampling (resample one of them)",
                describe(other),
                self.path.display(),
                describe(self)
            ),
        ))
    }
}

/// What the file header says.
struct FileHeader {
    revision: (u8, u8),
    order: ByteOrder,
    format: SampleFormat,
    text_encoding: TextEncoding,
    text: String,
    extended: usize,
    fixed_length: bool,
    /// Samples per trace, 0 when not given.
    samples: u32,
    /// Sample interval, µs, 0 when not given.
    interval: u16,
}

/// Offsets (0-based) of binary header fields in the file.
mod bin {
    pub const INTERVAL: usize = 3216;
    pub const SAMPLES: usize = 3220;
    pub const FORMAT: usize = 3224;
    pub const EXT_SAMPLES: usize = 3268;
    pub const EXT_INTERVAL: usize = 3272;
    pub const BYTE_ORDER: usize = 3296;
    pub const REVISION: usize = 3500;
    pub const FIXED_LENGTH: usize = 3502;
    pub const EXTENDED: usize = 3504;
    pub const TRACE_HEADERS: usize = 3506;
    pub const TRAILERS: usize = 3514;
}

/// Offsets (0-based) of trace header fields.
mod trace {
    pub const COORDINATE_UNITS: usize = 88;
    pub const DELAY: usize = 108;
    pub const SAMPLES: usize = 114;
    pub const INTERVAL: usize = 116;
    pub const TIME_SCALAR: usize = 214;
}

/// The value of the rev 2 byte-order constant (bytes 3297-3300).
const BYTE_ORDER_CONSTANT: u32 = 0x0102_0304;

/// Refuses the rev 2 layouts this reader does not follow, each named by its binary header
/// bytes (SEG-Y rev 2.0, from memory): an extended sample interval (3273-3280, an IEEE double
/// overriding 3217-3218), additional 240-byte trace headers (3507-3508) and trailer stanzas
/// (3515-3518). Read as they are, they would give wrong times or trace lengths.
fn refuse_rev2_layout(order: ByteOrder, head: &[u8]) -> std::result::Result<(), String> {
    let interval = [
        order.u32(head, bin::EXT_INTERVAL),
        order.u32(head, bin::EXT_INTERVAL + 4),
    ];
    let fields = [
        (
            interval != [0, 0],
            "3273-3280",
            "an extended sample interval",
        ),
        (
            order.u16(head, bin::TRACE_HEADERS) != 0,
            "3507-3508",
            "additional trace headers",
        ),
        (
            order.u32(head, bin::TRAILERS) != 0,
            "3515-3518",
            "trailer stanzas",
        ),
    ];
    match fields.iter().find(|f| f.0) {
        Some((_, bytes, what)) => Err(format!(
            "declares {what} (binary header bytes {bytes}), which flexure does not read: write the volume without them (rev 1 layout)"
        )),
        None => Ok(()),
    }
}

impl FileHeader {
    /// Reads the textual and binary headers (`head`: the first 3600 bytes).
    fn parse(head: &[u8]) -> std::result::Result<FileHeader, String> {
        let order = byte_order(head)?;
        let code = order.u16(head, bin::FORMAT);
        let format = SampleFormat::from_code(code).ok_or_else(|| {
            format!(
                "its sample format code (binary header bytes 3225-3226) is {code} ({}), which flexure does not read: convert it to code 1 (4-byte IBM float), 2 (4-byte integer), 3 (2-byte integer), 5 (4-byte IEEE float) or 8 (1-byte integer)",
                format_name(code).unwrap_or("not a SEG-Y format")
            )
        })?;
        let revision = revision(order.u16(head, bin::REVISION));
        if revision.0 > 2 {
            return Err(format!(
                "declares SEG-Y revision {}.{} (binary header bytes 3501-3502), which flexure does not know: it reads revisions 0, 1 and 2",
                revision.0, revision.1
            ));
        }
        let extended = order.i16(head, bin::EXTENDED);
        if extended < 0 {
            return Err(format!(
                "declares a variable number of extended textual headers ({extended} at binary header bytes 3505-3506), which flexure does not read: give the count"
            ));
        }
        if revision.0 >= 2 {
            refuse_rev2_layout(order, head)?;
        }
        let ext_samples = match revision.0 >= 2 {
            true => order.u32(head, bin::EXT_SAMPLES),
            false => 0,
        };
        let samples = match ext_samples {
            0 => order.u16(head, bin::SAMPLES) as u32,
            n => n,
        };
        let (text_encoding, text) = decode_text(&head[..TEXT_HEADER_BYTES]);
        Ok(FileHeader {
            revision,
            order,
            format,
            text_encoding,
            text,
            extended: extended as usize,
            fixed_length: order.u16(head, bin::FIXED_LENGTH) == 1,
            samples,
            interval: order.u16(head, bin::INTERVAL),
        })
    }

    /// Samples per trace and interval (µs): the binary header's, or the first trace header's
    /// where the binary header gives 0.
    fn sampling(
        &self,
        first: Option<&[u8; TRACE_HEADER_BYTES]>,
    ) -> std::result::Result<(usize, u32), String> {
        let from_trace = |at: usize| first.map_or(0, |h| self.order.u16(h, at));
        let samples = match self.samples {
            0 => from_trace(trace::SAMPLES) as u32,
            n => n,
        };
        let interval = match self.interval {
            0 => from_trace(trace::INTERVAL),
            n => n,
        };
        if samples == 0 {
            return Err("gives no number of samples per trace (binary header bytes 3221-3222 and bytes 115-116 of the first trace header are 0)".into());
        }
        if interval == 0 {
            return Err("gives no sample interval (binary header bytes 3217-3218 and bytes 117-118 of the first trace header are 0)".into());
        }
        Ok((samples as usize, interval as u32))
    }
}

/// The revision (major, minor) of the 16-bit revision field (bytes 3501-3502) read in the
/// file's byte order: major in the high byte, minor in the low one (rev 1 stores 1.0 as
/// 0x0100; segyio 1.9.14 reads and writes it so in either byte order). A field reading
/// 0x00nn (n > 0), revision 0.n, which does not exist, is read as revision n.0: written as a
/// plain integer, or as two bytes without regard to the byte order.
fn revision(field: u16) -> (u8, u8) {
    match field.to_be_bytes() {
        [0, minor] if minor > 0 => (minor, 0),
        [major, minor] => (major, minor),
    }
}

/// The byte order: the rev 2 constant's, else big-endian unless only the little-endian
/// reading of the format code is a SEG-Y code; not SEG-Y when neither is.
fn byte_order(head: &[u8]) -> std::result::Result<ByteOrder, String> {
    match ByteOrder::Big.u32(head, bin::BYTE_ORDER) {
        BYTE_ORDER_CONSTANT => return Ok(ByteOrder::Big),
        0x0403_0201 => return Ok(ByteOrder::Little),
        0x0201_0403 => {
            return Err("declares byte pairs swapped (byte-order constant 0x02010403 at binary header bytes 3297-3300), which flexure does not read: convert it to big- or little-endian".into())
        }
        _ => {}
    }
    let big = ByteOrder::Big.u16(head, bin::FORMAT);
    let little = ByteOrder::Little.u16(head, bin::FORMAT);
    match (format_name(big), format_name(little)) {
        (Some(_), _) => Ok(ByteOrder::Big),
        (None, Some(_)) => Ok(ByteOrder::Little),
        (None, None) => Err(format!(
            "is not SEG-Y: the sample format code at binary header bytes 3225-3226 reads {big} big-endian and {little} little-endian, neither a SEG-Y format code (1 to 16)"
        )),
    }
}

/// The header scan: a buffered reader over the file and where it is.
struct Scan {
    reader: BufReader<File>,
    /// Offset of the reader in the file.
    position: u64,
    order: ByteOrder,
    header: [u8; TRACE_HEADER_BYTES],
}

impl Scan {
    /// The 240 bytes at offset `at` (seeking within the buffer when it holds them).
    fn header_at(&mut self, at: u64) -> std::result::Result<[u8; TRACE_HEADER_BYTES], String> {
        let step = at as i64 - self.position as i64;
        self.reader
            .seek_relative(step)
            .and_then(|_| self.reader.read_exact(&mut self.header))
            .map_err(|e| format!("cannot read the trace header at byte {}: {e}", at + 1))?;
        self.position = at + TRACE_HEADER_BYTES as u64;
        Ok(self.header)
    }

    /// Reads every trace header of `info`'s traces: checks sample count, interval, delay and
    /// coordinate units, and collects the placing fields at `bytes` (the delay of trace 1
    /// becomes `info.delay_ms`).
    fn traces(
        &mut self,
        info: &mut SegyInfo,
        bytes: &SegyHeaderBytes,
    ) -> std::result::Result<NumberedNodes, String> {
        let n = info.traces;
        let mut nodes = NumberedNodes {
            inline: Vec::with_capacity(n),
            crossline: Vec::with_capacity(n),
            x: Vec::with_capacity(n),
            y: Vec::with_capacity(n),
        };
        let order = self.order;
        for k in 0..n {
            let at = info.data_start + k as u64 * info.trace_bytes();
            let h = self.header_at(at)?;
            let field =
                |offset: usize| format!("trace {} (file byte {})", k + 1, at + offset as u64 + 1);
            let samples = order.u16(&h, trace::SAMPLES) as usize;
            if samples != 0 && samples != info.samples {
                return Err(format!(
                    "{} has {samples} samples (trace header bytes 115-116) but the file {} (binary header bytes 3221-3222): traces of varying length are not read",
                    field(trace::SAMPLES),
                    info.samples
                ));
            }
            let interval = order.u16(&h, trace::INTERVAL) as u32;
            if interval != 0 && interval != info.sample_interval_us {
                return Err(format!(
                    "{} has a sample interval of {interval} µs (trace header bytes 117-118) but the file {} µs (binary header bytes 3217-3218): traces must share one sampling",
                    field(trace::INTERVAL),
                    info.sample_interval_us
                ));
            }
            let delay = order.i16(&h, trace::DELAY) as i32;
            if k == 0 {
                info.delay_ms = delay;
            } else if delay != info.delay_ms {
                return Err(format!(
                    "{} starts at {delay} ms (delay recording time, trace header bytes 109-110) but trace 1 at {} ms: traces must share one time axis",
                    field(trace::DELAY),
                    info.delay_ms
                ));
            }
            let time_scalar = order.i16(&h, trace::TIME_SCALAR);
            if delay != 0 && !matches!(time_scalar, -1..=1) {
                return Err(format!(
                    "{} has a delay of {delay} with a time scalar of {time_scalar} (trace header bytes 215-216), which flexure does not apply: give the delay in ms with a time scalar of 0 or +-1",
                    field(trace::TIME_SCALAR)
                ));
            }
            let units = order.u16(&h, trace::COORDINATE_UNITS);
            if matches!(units, 2..=4) {
                return Err(format!(
                    "{} gives its coordinates in {} (coordinate units {units}, trace header bytes 89-90): flexure needs projected map coordinates",
                    field(trace::COORDINATE_UNITS),
                    if units == 2 { "seconds of arc" } else { "degrees" }
                ));
            }
            let at_byte = |position: usize| position - 1;
            let scalar = order.i16(&h, at_byte(bytes.scalar));
            nodes
                .inline
                .push(order.i32(&h, at_byte(bytes.inline)) as i64);
            nodes
                .crossline
                .push(order.i32(&h, at_byte(bytes.crossline)) as i64);
            nodes
                .x
                .push(scaled(order.i32(&h, at_byte(bytes.x)), scalar));
            nodes
                .y
                .push(scaled(order.i32(&h, at_byte(bytes.y)), scalar));
        }
        Ok(nodes)
    }

    /// The refusal of `rest` bytes after the last whole trace of a `len`-byte file: a
    /// truncated trace when they begin with a trace header of this file's sampling, else
    /// trailing bytes.
    fn rest(&mut self, info: &SegyInfo, len: u64, rest: u64) -> String {
        let end = info.data_start + info.traces as u64 * info.trace_bytes();
        let looks_like_trace = rest >= TRACE_HEADER_BYTES as u64
            && self.header_at(end).is_ok_and(|h| {
                self.order.u16(&h, trace::SAMPLES) as usize == info.samples
                    && self.order.u16(&h, trace::INTERVAL) as u32 == info.sample_interval_us
            });
        match looks_like_trace {
            true => format!(
                "is truncated at byte {len}: trace {} starts at byte {} and needs {} bytes, {rest} remain",
                info.traces + 1,
                end + 1,
                info.trace_bytes()
            ),
            false => format!(
                "has {rest} trailing bytes after its last whole trace (trace {}, ending at byte {end}), less than a trace of {} bytes: the file is truncated at byte {len} or holds something else after its traces",
                info.traces,
                info.trace_bytes()
            ),
        }
    }
}

/// Converts `bytes` of samples in `format` and `order` into `out` (one sample each).
fn decode(format: SampleFormat, order: ByteOrder, bytes: &[u8], out: &mut [f32]) {
    let size = format.bytes();
    for (v, b) in out.iter_mut().zip(bytes.chunks_exact(size)) {
        *v = match format {
            SampleFormat::Ibm => ibm_to_f32(order.u32(b, 0)),
            SampleFormat::Ieee => f32::from_bits(order.u32(b, 0)),
            SampleFormat::Int32 => order.i32(b, 0) as f32,
            SampleFormat::Int16 => order.i16(b, 0) as f32,
            SampleFormat::Int8 => b[0] as i8 as f32,
        };
    }
}

/// The value of a 4-byte IBM System/360 hexadecimal float (bits as a big-endian `u32`), as
/// the nearest `f32`: `(-1)^s x 0.f x 16^(e - 64)` computed exactly in `f64` and rounded once
/// (to nearest, ties to even). Every IBM value from 16^-21 to just under 16^32 (1.2e-25 to
/// 3.4e38) converts exactly, unnormalised fractions included; larger magnitudes overflow to
/// +-infinity, smaller ones round to `f32` subnormals or to +-0. A zero fraction gives 0 with
/// the sign bit kept (0x80000000 is -0.0).
pub fn ibm_to_f32(bits: u32) -> f32 {
    let sign = if bits >> 31 == 1 { -1.0 } else { 1.0 };
    let exponent = ((bits >> 24) & 0x7f) as i32;
    let fraction = (bits & 0x00ff_ffff) as f64;
    // 0.f x 16^(e - 64) = fraction x 2^(4 (e - 64) - 24); exact in f64 (exponents -280..228).
    (sign * fraction * 2f64.powi(4 * (exponent - 64) - 24)) as f32
}

/// The 4-byte IBM System/360 hexadecimal float nearest to `value` (bits as a big-endian
/// `u32`), normalised (first hexadecimal digit of the fraction non-zero) and rounded to nearest,
/// ties to even; `None` for infinities and NaN, which the format cannot hold. Every finite
/// `f32`, subnormals included, lies inside the IBM range (16^-65 to 16^63), so nothing
/// overflows or underflows; zero (either sign) gives 0. The IBM fraction holds 21 to 24
/// significant bits, so values needing more are rounded (relative error at most 2^-21), and
/// every normalised IBM value within the `f32` range converts back bit for bit through
/// [`ibm_to_f32`].
pub fn f32_to_ibm(value: f32) -> Option<u32> {
    if !value.is_finite() {
        return None;
    }
    if value == 0.0 {
        return Some(0);
    }
    let sign = if value < 0.0 { 0x8000_0000u32 } else { 0 };
    let magnitude = (value as f64).abs();
    // 2^(k - 1) <= magnitude < 2^k (a normal f64, whatever the f32).
    let k = ((magnitude.to_bits() >> 52) & 0x7ff) as i32 - 1022;
    // 16^(e - 1) <= magnitude < 16^e for e = ceil(k / 4).
    let mut e = k.div_euclid(4) + i32::from(k.rem_euclid(4) != 0);
    let mut fraction = (magnitude * 2f64.powi(24 - 4 * e)).round_ties_even() as u32;
    if fraction == 1 << 24 {
        fraction = 1 << 20;
        e += 1;
    }
    Some(sign | (((e + 64) as u32) << 24) | fraction)
}

/// EBCDIC code page 037 to Latin-1 (from Python's `cp037` codec, which maps it onto U+0000 to
/// U+00FF one to one).
const EBCDIC_TO_LATIN1: [u8; 256] = [
    0x00, 0x01, 0x02, 0x03, 0x9c, 0x09, 0x86, 0x7f, 0x97, 0x8d, 0x8e, 0x0b, 0x0c, 0x0d, 0x0e, 0x0f,
    0x10, 0x11, 0x12, 0x13, 0x9d, 0x85, 0x08, 0x87, 0x18, 0x19, 0x92, 0x8f, 0x1c, 0x1d, 0x1e, 0x1f,
    0x80, 0x81, 0x82, 0x83, 0x84, 0x0a, 0x17, 0x1b, 0x88, 0x89, 0x8a, 0x8b, 0x8c, 0x05, 0x06, 0x07,
    0x90, 0x91, 0x16, 0x93, 0x94, 0x95, 0x96, 0x04, 0x98, 0x99, 0x9a, 0x9b, 0x14, 0x15, 0x9e, 0x1a,
    0x20, 0xa0, 0xe2, 0xe4, 0xe0, 0xe1, 0xe3, 0xe5, 0xe7, 0xf1, 0xa2, 0x2e, 0x3c, 0x28, 0x2b, 0x7c,
    0x26, 0xe9, 0xea, 0xeb, 0xe8, 0xed, 0xee, 0xef, 0xec, 0xdf, 0x21, 0x24, 0x2a, 0x29, 0x3b, 0xac,
    0x2d, 0x2f, 0xc2, 0xc4, 0xc0, 0xc1, 0xc3, 0xc5, 0xc7, 0xd1, 0xa6, 0x2c, 0x25, 0x5f, 0x3e, 0x3f,
    0xf8, 0xc9, 0xca, 0xcb, 0xc8, 0xcd, 0xce, 0xcf, 0xcc, 0x60, 0x3a, 0x23, 0x40, 0x27, 0x3d, 0x22,
    0xd8, 0x61, 0x62, 0x63, 0x64, 0x65, 0x66, 0x67, 0x68, 0x69, 0xab, 0xbb, 0xf0, 0xfd, 0xfe, 0xb1,
    0xb0, 0x6a, 0x6b, 0x6c, 0x6d, 0x6e, 0x6f, 0x70, 0x71, 0x72, 0xaa, 0xba, 0xe6, 0xb8, 0xc6, 0xa4,
    0xb5, 0x7e, 0x73, 0x74, 0x75, 0x76, 0x77, 0x78, 0x79, 0x7a, 0xa1, 0xbf, 0xd0, 0xdd, 0xde, 0xae,
    0x5e, 0xa3, 0xa5, 0xb7, 0xa9, 0xa7, 0xb6, 0xbc, 0xbd, 0xbe, 0x5b, 0x5d, 0xaf, 0xa8, 0xb4, 0xd7,
    0x7b, 0x41, 0x42, 0x43, 0x44, 0x45, 0x46, 0x47, 0x48, 0x49, 0xad, 0xf4, 0xf6, 0xf2, 0xf3, 0xf5,
    0x7d, 0x4a, 0x4b, 0x4c, 0x4d, 0x4e, 0x4f, 0x50, 0x51, 0x52, 0xb9, 0xfb, 0xfc, 0xf9, 0xfa, 0xff,
    0x5c, 0xf7, 0x53, 0x54, 0x55, 0x56, 0x57, 0x58, 0x59, 0x5a, 0xb2, 0xd4, 0xd6, 0xd2, 0xd3, 0xd5,
    0x30, 0x31, 0x32, 0x33, 0x34, 0x35, 0x36, 0x37, 0x38, 0x39, 0xb3, 0xdb, 0xdc, 0xd9, 0xda, 0x9f,
];

/// Latin-1 to EBCDIC code page 037: the inverse of [`EBCDIC_TO_LATIN1`].
const LATIN1_TO_EBCDIC: [u8; 256] = {
    let mut table = [0u8; 256];
    let mut i = 0;
    while i < 256 {
        table[EBCDIC_TO_LATIN1[i] as usize] = i as u8;
        i += 1;
    }
    table
};

/// Whether a Latin-1 character is a letter, digit or space (what textual headers are mostly
/// made of).
fn wordy(c: u8) -> bool {
    c.is_ascii_alphanumeric() || c == b' '
}

/// The textual header decoded: EBCDIC when that decoding yields more letters, digits and
/// spaces than reading the bytes as ASCII does, else ASCII (ties, e.g. an empty header, go to
/// ASCII).
fn decode_text(bytes: &[u8]) -> (TextEncoding, String) {
    let ascii = bytes.iter().filter(|&&b| wordy(b)).count();
    let ebcdic = bytes
        .iter()
        .filter(|&&b| wordy(EBCDIC_TO_LATIN1[b as usize]))
        .count();
    let (encoding, latin1): (TextEncoding, Vec<u8>) = match ebcdic > ascii {
        true => (
            TextEncoding::Ebcdic,
            bytes
                .iter()
                .map(|&b| EBCDIC_TO_LATIN1[b as usize])
                .collect(),
        ),
        false => (TextEncoding::Ascii, bytes.to_vec()),
    };
    (encoding, latin1.into_iter().map(char::from).collect())
}

/// How [`write_segy`] lays out a file.
#[derive(Clone, Debug, PartialEq)]
pub struct SegyWriteSpec {
    /// SEG-Y revision: 1 or 2. Rev 2 files carry the byte-order constant (bytes 3297-3300);
    /// the 4-byte extended sample count (3269-3272) is left 0, as the standard allows for
    /// counts the 2-byte field holds (segyio 1.9.14 reads it big-endian in little-endian files
    /// and then refuses them, measured).
    pub revision: u8,
    /// Byte order of headers and samples; little-endian is standard only in rev 2 (a rev 1
    /// little-endian file is read by plausibility of its format code).
    pub byte_order: ByteOrder,
    /// Sample format.
    pub format: SampleFormat,
    /// Encoding of the textual header.
    pub text_encoding: TextEncoding,
    /// The textual header: at most 40 lines of at most 80 printable ASCII characters, each
    /// padded with spaces to 80 (the standard's cards `C 1` ... are the caller's to write).
    pub text: Vec<String>,
    /// Sample interval, microseconds (1 to 65535).
    pub sample_interval_us: u16,
    /// Samples per trace (1 to 65535).
    pub samples: usize,
    /// Time of the first sample (delay recording time), milliseconds.
    pub delay_ms: i16,
    /// Where the placing fields go in each trace header.
    pub header_bytes: SegyHeaderBytes,
    /// Coordinate scalar written on every trace (e.g. -100: coordinates stored in
    /// hundredths); x and y are stored as the nearest integer of the scaled value.
    pub coordinate_scalar: i16,
}

/// One trace to write: its location and samples (`samples` of the spec of them).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SegyTrace<'a> {
    /// Inline number.
    pub inline: i32,
    /// Crossline number.
    pub crossline: i32,
    /// Map x, CRS units (stored as the integer nearest to x with the scalar undone: x times
    /// 100 for a scalar of -100).
    pub x: f64,
    /// Map y, CRS units.
    pub y: f64,
    /// The samples; integer formats need integer values within their range, IBM floats
    /// finite ones (rounded as [`f32_to_ibm`] says).
    pub samples: &'a [f32],
}

/// Writes a SEG-Y file atomically (temporary name, read back with [`SegyVolume::open`],
/// rename; see [`stage_segy`]).
pub fn write_segy<'a>(
    path: &Path,
    spec: &SegyWriteSpec,
    traces: impl IntoIterator<Item = SegyTrace<'a>>,
) -> Result<()> {
    stage_segy(path, spec, traces)?.commit()
}

/// Writes a SEG-Y file under a temporary name, trace by trace (memory does not grow with the
/// file), and reads it back with [`SegyVolume::open`]; the caller renames it into place with
/// [`StagedFile::commit`]. Each trace header gets its sequence number in the line and file
/// (bytes 1-4, 5-8), the coordinate scalar, coordinate units 1 (length, bytes 89-90), the
/// delay, sample count and interval, and inline, crossline, x and y at the spec's byte
/// positions; the binary header gets the interval and sample count (also as the originals,
/// 3219-3220 and 3223-3224), the format code, the revision, the fixed-length flag (1) and no
/// extended textual headers. Errors: a spec out of range, a trace of another length, a sample
/// the format cannot hold, a coordinate beyond 4-byte integers, a failed write.
pub fn stage_segy<'a>(
    path: &Path,
    spec: &SegyWriteSpec,
    traces: impl IntoIterator<Item = SegyTrace<'a>>,
) -> Result<StagedFile> {
    let fail = |reason: String| FlexureError::write(path, reason);
    spec.header_bytes.check()?;
    let head = file_header(spec).map_err(&fail)?;
    let staged = StagedFile::new(path);
    let file = File::create(staged.temp()).map_err(|e| fail(e.to_string()))?;
    let mut out = BufWriter::new(file);
    out.write_all(&head).map_err(|e| fail(e.to_string()))?;
    let size = spec.format.bytes();
    let mut block = vec![0u8; TRACE_HEADER_BYTES + spec.samples * size];
    let mut count = 0usize;
    for (k, t) in traces.into_iter().enumerate() {
        let what = || {
            format!(
                "trace {} (inline {}, crossline {})",
                k + 1,
                t.inline,
                t.crossline
            )
        };
        if t.samples.len() != spec.samples {
            return Err(fail(format!(
                "{} has {} samples, the file {}",
                what(),
                t.samples.len(),
                spec.samples
            )));
        }
        block.fill(0);
        trace_header(spec, k, &t, &mut block[..TRACE_HEADER_BYTES])
            .map_err(|why| fail(format!("{}: {why}", what())))?;
        encode(spec, t.samples, &mut block[TRACE_HEADER_BYTES..])
            .map_err(|why| fail(format!("{}: {why}", what())))?;
        out.write_all(&block).map_err(|e| fail(e.to_string()))?;
        count += 1;
    }
    out.into_inner()
        .map_err(|e| fail(e.to_string()))?
        .sync_all()
        .map_err(|e| fail(e.to_string()))?;
    if count == 0 {
        return Err(fail("no traces to write".into()));
    }
    let back = SegyVolume::open(staged.temp(), &spec.header_bytes)
        .map_err(|e| fail(format!("read back: {e}")))?;
    if back.traces() != count || back.samples() != spec.samples {
        return Err(fail(format!(
            "read back {} traces of {} samples, wrote {count} of {}",
            back.traces(),
            back.samples(),
            spec.samples
        )));
    }
    Ok(staged)
}

/// The 3600-byte textual and binary header of `spec`.
fn file_header(spec: &SegyWriteSpec) -> std::result::Result<Vec<u8>, String> {
    if !matches!(spec.revision, 1 | 2) {
        return Err(format!(
            "SEG-Y revision {} is not written: give 1 or 2",
            spec.revision
        ));
    }
    let samples = u16::try_from(spec.samples)
        .ok()
        .filter(|&n| n > 0)
        .ok_or_else(|| format!("{} samples per trace: give 1 to 65535", spec.samples))?;
    if spec.sample_interval_us == 0 {
        return Err("a sample interval of 0 µs: give 1 to 65535".into());
    }
    if spec.text.len() > 40 {
        return Err(format!(
            "{} textual header lines: give at most 40",
            spec.text.len()
        ));
    }
    let mut head = vec![b' '; FILE_HEADER_BYTES];
    for (i, line) in spec.text.iter().enumerate() {
        if line.len() > 80 || !line.bytes().all(|b| (0x20..0x7f).contains(&b)) {
            return Err(format!(
                "textual header line {} is not at most 80 printable ASCII characters: '{line}'",
                i + 1
            ));
        }
        head[i * 80..i * 80 + line.len()].copy_from_slice(line.as_bytes());
    }
    if spec.text_encoding == TextEncoding::Ebcdic {
        for b in &mut head[..TEXT_HEADER_BYTES] {
            *b = LATIN1_TO_EBCDIC[*b as usize];
        }
    }
    let binary = &mut head[TEXT_HEADER_BYTES..];
    binary.fill(0);
    let order = spec.byte_order;
    let at = |offset: usize| offset - TEXT_HEADER_BYTES;
    order.put_u16(binary, at(bin::INTERVAL), spec.sample_interval_us);
    order.put_u16(binary, at(bin::INTERVAL) + 2, spec.sample_interval_us);
    order.put_u16(binary, at(bin::SAMPLES), samples);
    order.put_u16(binary, at(bin::SAMPLES) + 2, samples);
    order.put_u16(binary, at(bin::FORMAT), spec.format.code());
    if spec.revision == 2 {
        order.put_u32(binary, at(bin::BYTE_ORDER), BYTE_ORDER_CONSTANT);
    }
    order.put_u16(binary, at(bin::REVISION), (spec.revision as u16) << 8);
    order.put_u16(binary, at(bin::FIXED_LENGTH), 1);
    Ok(head)
}

/// Fills the 240-byte header of trace `k`.
fn trace_header(
    spec: &SegyWriteSpec,
    k: usize,
    t: &SegyTrace,
    h: &mut [u8],
) -> std::result::Result<(), String> {
    let order = spec.byte_order;
    let sequence = u32::try_from(k + 1).map_err(|_| "more traces than SEG-Y numbers")?;
    order.put_u32(h, 0, sequence);
    order.put_u32(h, 4, sequence);
    order.put_u16(h, trace::COORDINATE_UNITS, 1);
    order.put_u16(h, trace::DELAY, spec.delay_ms as u16);
    order.put_u16(h, trace::SAMPLES, spec.samples as u16);
    order.put_u16(h, trace::INTERVAL, spec.sample_interval_us);
    let stored = |v: f64, name: &str| {
        let s = unscaled(v, spec.coordinate_scalar).round();
        match s.is_finite() && s >= i32::MIN as f64 && s <= i32::MAX as f64 {
            true => Ok(s as i32),
            false => Err(format!(
                "{name} {v} does not fit a 4-byte integer with the coordinate scalar {}",
                spec.coordinate_scalar
            )),
        }
    };
    let bytes = &spec.header_bytes;
    order.put_u16(h, bytes.scalar - 1, spec.coordinate_scalar as u16);
    order.put_u32(h, bytes.x - 1, stored(t.x, "x")? as u32);
    order.put_u32(h, bytes.y - 1, stored(t.y, "y")? as u32);
    order.put_u32(h, bytes.inline - 1, t.inline as u32);
    order.put_u32(h, bytes.crossline - 1, t.crossline as u32);
    Ok(())
}

/// Encodes `samples` in the spec's format and byte order into `out`.
fn encode(
    spec: &SegyWriteSpec,
    samples: &[f32],
    out: &mut [u8],
) -> std::result::Result<(), String> {
    let (format, order) = (spec.format, spec.byte_order);
    for (i, (&v, b)) in samples
        .iter()
        .zip(out.chunks_exact_mut(format.bytes()))
        .enumerate()
    {
        if let Some((lo, hi)) = format.integer_range() {
            if !(v.fract() == 0.0 && v >= lo && v < hi) {
                return Err(format!(
                    "sample {} is {v}, not a value of the {} format",
                    i + 1,
                    format_name(format.code()).unwrap_or("integer")
                ));
            }
        }
        match format {
            SampleFormat::Ibm => {
                let bits = f32_to_ibm(v).ok_or_else(|| {
                    format!("sample {} is {v}, which IBM floats cannot hold", i + 1)
                })?;
                order.put_u32(b, 0, bits);
            }
            SampleFormat::Ieee => order.put_u32(b, 0, v.to_bits()),
            SampleFormat::Int32 => order.put_u32(b, 0, v as i32 as u32),
            SampleFormat::Int16 => order.put_u16(b, 0, v as i16 as u16),
            SampleFormat::Int8 => b[0] = v as i8 as u8,
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An IBM word's value in f64, exactly (the definition, `../shared/REFERENCES.md`
    /// "SEG-Y"): `(-1)^s x fraction x 16^(e - 64) / 2^24`.
    fn ibm_value(bits: u32) -> f64 {
        let sign = if bits >> 31 == 1 { -1.0 } else { 1.0 };
        let e = ((bits >> 24) & 0x7f) as i32 - 64;
        sign * (bits & 0xff_ffff) as f64 / 16_777_216.0 * 16f64.powi(e)
    }

    /// Deterministic pseudo-random words (SplitMix64, common practice).
    fn words(n: usize, seed: u64) -> impl Iterator<Item = u64> {
        (0..n as u64).map(move |k| {
            let mut z = (seed + k).wrapping_mul(0x9e37_79b9_7f4a_7c15);
            z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            z ^ (z >> 31)
        })
    }

    #[test]
    fn ibm_floats_match_the_published_examples() {
        // ../shared/REFERENCES.md "SEG-Y" [D]: the IBM System/360 examples.
        for (bits, value) in [
            (0x4110_0000u32, 1.0f32),
            (0x4264_0000, 100.0),
            (0xC276_A000, -118.625),
            (0x0000_0000, 0.0),
        ] {
            assert_eq!(ibm_to_f32(bits), value, "{bits:08x}");
            assert_eq!(f32_to_ibm(value), Some(bits), "{value}");
        }
        // -0.0, and 1.0 unnormalised (fraction 0.001 hex x 16^3), read as their values.
        assert_eq!(ibm_to_f32(0x8000_0000).to_bits(), (-0.0f32).to_bits());
        assert_eq!(ibm_to_f32(0x4300_1000), 1.0);
    }

    #[test]
    fn ibm_range_limits_overflow_and_underflow_as_documented() {
        // Largest IBM value 16^63 (1 - 2^-24), about 7.2e75: beyond f32, so infinite.
        assert_eq!(ibm_to_f32(0x7fff_ffff), f32::INFINITY);
        assert_eq!(ibm_to_f32(0xffff_ffff), f32::NEG_INFINITY);
        // Smallest normalised IBM value 16^-65, about 5.4e-79: below f32, so 0.
        assert_eq!(ibm_to_f32(0x0010_0000), 0.0);
        // f32::MAX = 16^32 (1 - 2^-24) and the smallest subnormal 2^-149 are exact in IBM.
        for v in [f32::MAX, f32::from_bits(1), -f32::from_bits(1)] {
            let bits = f32_to_ibm(v).unwrap();
            assert_eq!(ibm_value(bits), v as f64);
            assert_eq!(ibm_to_f32(bits), v);
        }
        assert_eq!(f32_to_ibm(f32::NAN), None);
        assert_eq!(f32_to_ibm(f32::INFINITY), None);
        assert_eq!(f32_to_ibm(-0.0), Some(0));
    }

    #[test]
    fn normalised_ibm_words_in_f32_range_round_trip_bit_for_bit() {
        // Exponents 44..=96 are 16^-21 ..16^32: f32 normal range; fractions normalised.
        for w in words(300_000, 7) {
            let e = 44 + (w >> 40) as u32 % 53;
            let fraction = 0x10_0000 + (w as u32 % 0xf0_0000);
            let bits = ((w >> 63) as u32) << 31 | e << 24 | fraction;
            let v = ibm_to_f32(bits);
            assert_eq!(v as f64, ibm_value(bits), "{bits:08x}");
            assert_eq!(f32_to_ibm(v), Some(bits), "{bits:08x}");
        }
    }

    #[test]
    fn f32_to_ibm_gives_the_nearest_ibm_value() {
        // Nearest: neither neighbouring fraction is closer; ties go to the even fraction.
        for w in words(300_000, 11) {
            let x = f32::from_bits(w as u32);
            if !x.is_finite() || x == 0.0 {
                continue;
            }
            let bits = f32_to_ibm(x).unwrap();
            let fraction = bits & 0xff_ffff;
            assert!(fraction >= 0x10_0000, "{x}: not normalised {bits:08x}");
            let miss = (ibm_value(bits) - x as f64).abs();
            // The normalised IBM values just below and above (fractions wrap to the next
            // exponent).
            let (sign_exp, e) = (bits & 0xff00_0000, 1 << 24);
            let below = match fraction {
                0x10_0000 => (sign_exp - e) | 0xff_ffff,
                f => sign_exp | (f - 1),
            };
            let above = match fraction {
                0xff_ffff => (sign_exp + e) | 0x10_0000,
                f => sign_exp | (f + 1),
            };
            for neighbour in [below, above] {
                let other = (ibm_value(neighbour) - x as f64).abs();
                assert!(
                    miss < other || (miss == other && fraction.is_multiple_of(2)),
                    "{x}: {bits:08x} vs {neighbour:08x}"
                );
            }
            assert!(miss <= x.abs() as f64 * 2f64.powi(-21), "{x}");
        }
    }

    #[test]
    fn ebcdic_table_is_code_page_037() {
        // From memory of code page 037, as Python's cp037 codec has it: 'C' is 0xC3, space
        // 0x40, '1' 0xF1, 'a' 0x81, '.' 0x4B.
        for (ebcdic, latin1) in [
            (0xc3, b'C'),
            (0x40, b' '),
            (0xf1, b'1'),
            (0x81, b'a'),
            (0x4b, b'.'),
        ] {
            assert_eq!(EBCDIC_TO_LATIN1[ebcdic], latin1);
            assert_eq!(LATIN1_TO_EBCDIC[latin1 as usize] as usize, ebcdic);
        }
        for b in 0..=255u8 {
            assert_eq!(EBCDIC_TO_LATIN1[LATIN1_TO_EBCDIC[b as usize] as usize], b);
        }
        let card = b"C 1 CLIENT".map(|c| LATIN1_TO_EBCDIC[c as usize]);
        let mut text = vec![0x40u8; TEXT_HEADER_BYTES];
        text[..card.len()].copy_from_slice(&card);
        let (encoding, decoded) = decode_text(&text);
        assert_eq!(encoding, TextEncoding::Ebcdic);
        assert!(decoded.starts_with("C 1 CLIENT  "));
        let (encoding, _) = decode_text(&[b' '; TEXT_HEADER_BYTES]);
        assert_eq!(encoding, TextEncoding::Ascii);
    }

    /// A small valid volume: 5 crosslines (10..=14) x 4 inlines (1..=4) on a north-up 25 m
    /// lattice, 20 samples of 4 ms, trace k sample i = 100 k + i.
    fn spec() -> SegyWriteSpec {
        SegyWriteSpec {
            revision: 1,
            byte_order: ByteOrder::Big,
            format: SampleFormat::Ieee,
            text_encoding: TextEncoding::Ebcdic,
            text: vec!["C 1 A TEST VOLUME".into()],
            sample_interval_us: 4000,
            samples: 20,
            delay_ms: 0,
            header_bytes: SegyHeaderBytes::default(),
            coordinate_scalar: -100,
        }
    }

    fn write(path: &Path, spec: &SegyWriteSpec) {
        let samples: Vec<Vec<f32>> = (0..20)
            .map(|k| (0..spec.samples).map(|i| (100 * k + i) as f32).collect())
            .collect();
        let traces = (0..20).map(|k| SegyTrace {
            inline: 1 + k as i32 / 5,
            crossline: 10 + k as i32 % 5,
            x: 500_000.0 + 25.0 * (k % 5) as f64,
            y: 4_000_000.0 + 25.0 * (k / 5) as f64,
            samples: &samples[k],
        });
        write_segy(path, spec, traces).unwrap();
    }

    fn small(dir: &Path) -> PathBuf {
        let path = dir.join("v.sgy");
        write(&path, &spec());
        path
    }

    /// The error of opening `path`, checked to be one line naming the file.
    fn refused(path: &Path, bytes: &SegyHeaderBytes) -> String {
        let err = SegyVolume::open(path, bytes).unwrap_err().to_string();
        assert!(
            !err.contains('\n') && err.contains(&path.display().to_string()),
            "{err}"
        );
        err
    }

    fn patch(path: &Path, at: usize, bytes: &[u8]) {
        let mut data = std::fs::read(path).unwrap();
        data[at..at + bytes.len()].copy_from_slice(bytes);
        std::fs::write(path, data).unwrap();
    }

    #[test]
    fn a_written_volume_reads_back_with_its_windows() {
        // Round trip through our writer for every format and byte order (the external check
        // of both is tests/segy_reference.rs against segyio).
        let dir = tempfile::tempdir().unwrap();
        for format in [
            SampleFormat::Ibm,
            SampleFormat::Int32,
            SampleFormat::Int16,
            SampleFormat::Ieee,
        ] {
            for byte_order in [ByteOrder::Big, ByteOrder::Little] {
                let path = dir.path().join("rt.sgy");
                let s = SegyWriteSpec {
                    format,
                    byte_order,
                    revision: 2,
                    delay_ms: 40,
                    ..spec()
                };
                write(&path, &s);
                let mut v = SegyVolume::open(&path, &s.header_bytes).unwrap();
                assert_eq!(v.info().byte_order, byte_order);
                assert_eq!(v.info().format, format);
                assert_eq!(v.info().revision, (2, 0));
                assert_eq!((v.traces(), v.samples()), (20, 20));
                assert_eq!((v.sample_interval_ms(), v.first_time_ms()), (4.0, 40.0));
                let mut out = [0f32; 5];
                v.read_samples(13, 7, &mut out).unwrap();
                assert_eq!(out, [1307.0, 1308.0, 1309.0, 1310.0, 1311.0]);
                let t = v.trace(13).unwrap();
                assert_eq!(
                    (t.inline, t.crossline, t.x, t.y),
                    (3, 13, 500_075.0, 4_000_050.0)
                );
            }
        }
    }

    #[test]
    fn files_that_are_not_segy_are_refused_naming_the_byte() {
        let dir = tempfile::tempdir().unwrap();
        let text = dir.path().join("points.txt");
        std::fs::write(&text, "x y z\n".repeat(1000)).unwrap();
        let err = refused(&text, &SegyHeaderBytes::default());
        assert!(
            err.contains("is not SEG-Y: the sample format code"),
            "{err}"
        );
        let short = dir.path().join("short.txt");
        std::fs::write(&short, "x y z\n1 2 3\n").unwrap();
        let err = refused(&short, &SegyHeaderBytes::default());
        assert!(
            err.contains("is not SEG-Y or is truncated: it ends at byte 12"),
            "{err}"
        );
        // A GeoTIFF (written through GDAL): not SEG-Y either way.
        let tif = dir.path().join("grid.tif");
        let geometry = GridGeometry {
            cols: 60,
            rows: 50,
            geo_transform: [500_000.0, 25.0, 0.0, 4_000_000.0, 0.0, -25.0],
            crs_wkt: String::new(),
            metres_per_unit: 1.0,
        };
        let values = Array2::from_shape_fn((50, 60), |(r, c)| (r * 60 + c) as f32);
        crate::io::write_float_geotiff(
            &tif,
            &geometry,
            &[crate::io::BandOut {
                description: "twt",
                unit: "ms",
                values,
            }],
            &[],
        )
        .unwrap();
        let err = refused(&tif, &SegyHeaderBytes::default());
        assert!(err.contains("not SEG-Y"), "{err}");
    }

    #[test]
    fn truncated_files_and_trailing_bytes_are_refused_naming_the_byte() {
        let dir = tempfile::tempdir().unwrap();
        let path = small(dir.path());
        let data = std::fs::read(&path).unwrap();
        // Hand-checkable: 3600 header bytes, traces of 240 + 20 x 4 = 320 bytes.
        assert_eq!(data.len(), 3600 + 20 * 320);
        std::fs::write(&path, &data[..data.len() - 50]).unwrap();
        let err = refused(&path, &SegyHeaderBytes::default());
        assert!(
            err.contains("is truncated at byte 9950: trace 20 starts at byte 9681 and needs 320 bytes, 270 remain"),
            "{err}"
        );
        // Cut inside the last trace header: not told apart from trailing bytes.
        std::fs::write(&path, &data[..data.len() - 100]).unwrap();
        let err = refused(&path, &SegyHeaderBytes::default());
        assert!(
            err.contains("has 220 trailing bytes after its last whole trace (trace 19, ending at byte 9680), less than a trace of 320 bytes: the file is truncated at byte 9900"),
            "{err}"
        );
        std::fs::write(&path, &data[..3000]).unwrap();
        let err = refused(&path, &SegyHeaderBytes::default());
        assert!(err.contains("ends at byte 3000"), "{err}");
        let mut longer = data.clone();
        longer.extend_from_slice(&[0u8; 100]);
        std::fs::write(&path, &longer).unwrap();
        let err = refused(&path, &SegyHeaderBytes::default());
        assert!(err.contains("has 100 trailing bytes after its last whole trace (trace 20, ending at byte 10000)"), "{err}");
        std::fs::write(&path, &data[..3600]).unwrap();
        let err = refused(&path, &SegyHeaderBytes::default());
        assert!(err.contains("holds no traces"), "{err}");
    }

    #[test]
    fn unknown_formats_revisions_and_byte_orders_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        let path = small(dir.path());
        let bytes = SegyHeaderBytes::default();
        patch(&path, bin::FORMAT, &[0, 6]);
        let err = refused(&path, &bytes);
        assert!(
            err.contains(
                "sample format code (binary header bytes 3225-3226) is 6 (8-byte IEEE float)"
            ),
            "{err}"
        );
        patch(&path, bin::FORMAT, &[0, 5]);
        patch(&path, bin::REVISION, &[3, 0]);
        assert!(refused(&path, &bytes).contains("revision 3.0"));
        patch(&path, bin::REVISION, &[1, 0]);
        patch(&path, bin::BYTE_ORDER, &[2, 1, 4, 3]);
        assert!(refused(&path, &bytes).contains("byte pairs swapped"));
        patch(&path, bin::BYTE_ORDER, &[0, 0, 0, 0]);
        patch(&path, bin::EXTENDED, &[0xff, 0xff]);
        assert!(refused(&path, &bytes).contains("variable number of extended textual headers"));
        patch(&path, bin::EXTENDED, &[0, 0]);
        // Rev 1 written as the integer 1 (0x0001) reads as revision 1.0.
        patch(&path, bin::REVISION, &[0, 1]);
        assert_eq!(
            SegyVolume::open(&path, &bytes).unwrap().info().revision,
            (1, 0)
        );
    }

    #[test]
    fn rev2_layouts_the_reader_does_not_follow_are_refused_by_byte() {
        // SEG-Y rev 2 (from memory): extended sample interval 3273-3280, additional trace
        // headers 3507-3508, trailer stanzas 3515-3518; each changes times or trace lengths.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("rev2.sgy");
        let rev2 = SegyWriteSpec {
            revision: 2,
            ..spec()
        };
        let bytes = SegyHeaderBytes::default();
        for (at, value, named) in [
            (bin::EXT_INTERVAL, &[0x40u8, 0, 0, 0][..], "3273-3280"),
            (bin::TRACE_HEADERS, &[0, 1][..], "3507-3508"),
            (bin::TRAILERS, &[0, 0, 0, 2][..], "3515-3518"),
        ] {
            write(&path, &rev2);
            assert!(SegyVolume::open(&path, &bytes).is_ok());
            patch(&path, at, value);
            let err = refused(&path, &bytes);
            assert!(err.contains(named), "{err}");
        }
        // The same bytes are unassigned in rev 1 and not read there.
        write(&path, &spec());
        patch(&path, bin::TRACE_HEADERS, &[0, 1]);
        assert!(SegyVolume::open(&path, &bytes).is_ok());
    }

    #[test]
    fn header_positions_beyond_any_trace_header_are_refused() {
        let huge = SegyHeaderBytes {
            inline: usize::MAX,
            ..SegyHeaderBytes::default()
        };
        let err = huge.check().unwrap_err().to_string();
        assert!(err.contains("outside the trace header"), "{err}");
    }

    #[test]
    fn rev2_extended_sample_count_overrides_the_two_byte_count() {
        // SEG-Y rev 2 (from memory; segyio names bytes 3269-3272 ExtSamples): a non-zero
        // 4-byte count at 3269-3272 overrides 3221-3222.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("ext.sgy");
        write(
            &path,
            &SegyWriteSpec {
                revision: 2,
                ..spec()
            },
        );
        patch(&path, bin::SAMPLES, &[0, 0]);
        patch(&path, bin::EXT_SAMPLES, &[0, 0, 0, 20]);
        let v = SegyVolume::open(&path, &SegyHeaderBytes::default()).unwrap();
        assert_eq!(v.samples(), 20);
        patch(&path, bin::EXT_SAMPLES, &[0, 0, 0, 21]);
        let err = refused(&path, &SegyHeaderBytes::default());
        assert!(
            err.contains("trace 1 (file byte 3715) has 20 samples"),
            "{err}"
        );
    }

    #[test]
    fn trace_headers_that_disagree_with_the_file_are_named() {
        let dir = tempfile::tempdir().unwrap();
        let bytes = SegyHeaderBytes::default();
        // Trace 3 starts at 3600 + 2 x 320 = 4240 (0-based); its bytes 115-116 at file byte
        // 4240 + 115 = 4355 (1-based).
        let trace3 = 3600 + 2 * 320;
        for (offset, value, says) in [
            (trace::SAMPLES, 19u16, "trace 3 (file byte 4355) has 19 samples (trace header bytes 115-116) but the file 20"),
            (trace::INTERVAL, 2000, "trace 3 (file byte 4357) has a sample interval of 2000 µs"),
            (trace::DELAY, 8, "trace 3 (file byte 4349) starts at 8 ms (delay recording time, trace header bytes 109-110) but trace 1 at 0 ms"),
            (trace::COORDINATE_UNITS, 3, "coordinates in degrees"),
        ] {
            let path = small(dir.path());
            patch(&path, trace3 + offset, &value.to_be_bytes());
            let err = refused(&path, &bytes);
            assert!(err.contains(says), "{err}");
        }
        // A delay with a time scalar the reader does not apply.
        let path = dir.path().join("delay.sgy");
        write(
            &path,
            &SegyWriteSpec {
                delay_ms: 100,
                ..spec()
            },
        );
        patch(&path, 3600 + trace::TIME_SCALAR, &10u16.to_be_bytes());
        assert!(refused(&path, &bytes).contains("time scalar of 10"));
        // 0 in a trace header means "not recorded".
        let path = small(dir.path());
        patch(&path, trace3 + trace::SAMPLES, &[0, 0]);
        assert!(SegyVolume::open(&path, &bytes).is_ok());
    }

    #[test]
    fn header_byte_positions_are_checked() {
        let bad = |b: SegyHeaderBytes| {
            let dir = tempfile::tempdir().unwrap();
            let err = SegyVolume::open(&small(dir.path()), &b)
                .unwrap_err()
                .to_string();
            assert!(!err.contains('\n'), "{err}");
            err
        };
        let d = SegyHeaderBytes::default();
        assert!(bad(SegyHeaderBytes { inline: 238, ..d }).contains("outside the trace header"));
        assert!(bad(SegyHeaderBytes { inline: 0, ..d }).contains("outside the trace header"));
        assert!(bad(SegyHeaderBytes {
            crossline: 191,
            ..d
        })
        .contains("overlaps the crossline"));
        assert!(bad(SegyHeaderBytes { x: 113, ..d }).contains("overlaps the samples field"));
    }

    #[test]
    fn wrong_header_bytes_give_a_lattice_refusal_with_a_hint() {
        // Bytes 9-12 (field record) are 0 on every trace our writer writes: every trace on
        // one "inline".
        let dir = tempfile::tempdir().unwrap();
        let path = small(dir.path());
        let bytes = SegyHeaderBytes {
            inline: 9,
            ..Default::default()
        };
        let v = SegyVolume::open(&path, &bytes).unwrap();
        let err = v.lattice(0.05).unwrap_err().to_string();
        assert!(!err.contains('\n'), "{err}");
        for s in [
            "the traces span 5 x 1 nodes",
            "inline at trace header byte 9",
            "give the byte positions",
        ] {
            assert!(err.contains(s), "'{s}' in {err}");
        }
        // Two traces at one node.
        let path = dir.path().join("twice.sgy");
        let samples = vec![0f32; 20];
        let traces = (0..21).map(|k: usize| {
            let k = k.min(19) - usize::from(k == 20) * 19;
            SegyTrace {
                inline: 1 + k as i32 / 5,
                crossline: 10 + k as i32 % 5,
                x: 500_000.0 + 25.0 * (k % 5) as f64,
                y: 4_000_000.0 + 25.0 * (k / 5) as f64,
                samples: &samples,
            }
        });
        write_segy(&path, &spec(), traces).unwrap();
        let v = SegyVolume::open(&path, &SegyHeaderBytes::default()).unwrap();
        let err = v.lattice(0.05).unwrap_err().to_string();
        assert!(
            err.contains("traces 1 and 21 both give node (inline 1, crossline 10)"),
            "{err}"
        );
    }

    #[test]
    fn windows_beyond_the_trace_are_refused_in_samples_and_ms() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("d.sgy");
        write(
            &path,
            &SegyWriteSpec {
                delay_ms: 100,
                ..spec()
            },
        );
        let mut v = SegyVolume::open(&path, &SegyHeaderBytes::default()).unwrap();
        let mut out = [0f32; 6];
        let err = v.read_samples(0, 16, &mut out).unwrap_err().to_string();
        assert!(
            err.contains("a window of samples 16..22 (164 to 184 ms) reaches beyond the traces, which hold samples 0..20 (100 to 176 ms)"),
            "{err}"
        );
        let err = v.read_samples(20, 0, &mut out).unwrap_err().to_string();
        assert!(err.contains("has 20 traces, no trace 21"), "{err}");
        assert!(v.read_samples(19, 14, &mut out).is_ok());
    }

    #[test]
    fn sector_volumes_must_share_one_sampling() {
        let dir = tempfile::tempdir().unwrap();
        let (a, b) = (dir.path().join("a.sgy"), dir.path().join("b.sgy"));
        write(&a, &spec());
        write(
            &b,
            &SegyWriteSpec {
                sample_interval_us: 2000,
                ..spec()
            },
        );
        let bytes = SegyHeaderBytes::default();
        let (va, vb) = (
            SegyVolume::open(&a, &bytes).unwrap(),
            SegyVolume::open(&b, &bytes).unwrap(),
        );
        assert!(va.check_same_sampling(&va).is_ok());
        let err = va.check_same_sampling(&vb).unwrap_err().to_string();
        assert!(
            err.contains("20 samples of 2 ms from 0 ms but")
                && err.contains("a.sgy has 20 samples of 4 ms"),
            "{err}"
        );
    }

    #[test]
    fn traces_land_on_the_horizon_cells_at_their_coordinates() {
        // Hand-checkable geometry: the volume's 5 x 4 nodes (500000 + 25 c, 4000000 + 25 r)
        // on horizon grids of the same 25 m lattice covering more, with rows running south
        // (north-up raster) or north; each trace must land on the horizon cell whose centre
        // is its x, y.
        let dir = tempfile::tempdir().unwrap();
        let path = small(dir.path());
        let v = SegyVolume::open(&path, &SegyHeaderBytes::default()).unwrap();
        let placement = v.lattice(0.05).unwrap();
        let horizons = [
            [499_937.5, 25.0, 0.0, 4_000_137.5, 0.0, -25.0],
            [499_912.5, 25.0, 0.0, 3_999_912.5, 0.0, 25.0],
        ];
        for gt in horizons {
            let horizon = GridGeometry {
                cols: 12,
                rows: 9,
                geo_transform: gt,
                crs_wkt: String::new(),
                metres_per_unit: 1.0,
            };
            let traces = v
                .traces_on(&placement, Path::new("h.tif"), &horizon, 0.05)
                .unwrap();
            let mut found = 0;
            for ((r, c), &k) in traces.indexed_iter() {
                if k == NO_TRACE {
                    continue;
                }
                let t = v.trace(k as usize).unwrap();
                assert_eq!(horizon.cell_centre(c, r), (t.x, t.y));
                found += 1;
            }
            // The first horizon holds every trace; the second starts 2 bins west and south,
            // so all 20 too.
            assert_eq!(found, 20);
        }
        // Half a bin off, or 20 m bins: refused naming both files.
        let mut off = GridGeometry {
            cols: 12,
            rows: 9,
            geo_transform: [499_950.0, 25.0, 0.0, 4_000_150.0, 0.0, -25.0],
            crs_wkt: String::new(),
            metres_per_unit: 1.0,
        };
        let err = v
            .traces_on(&placement, Path::new("h.tif"), &off, 0.05)
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("lies on another lattice than the horizon h.tif")
                && err.contains("off the other grid's nodes"),
            "{err}"
        );
        off.geo_transform = [499_937.5, 20.0, 0.0, 4_000_137.5, 0.0, -20.0];
        let err = v
            .traces_on(&placement, Path::new("h.tif"), &off, 0.05)
            .unwrap_err()
            .to_string();
        assert!(err.contains("other bins"), "{err}");
        off.geo_transform = [599_987.5, 25.0, 0.0, 4_000_137.5, 0.0, -25.0];
        let err = v
            .traces_on(&placement, Path::new("h.tif"), &off, 0.05)
            .unwrap_err()
            .to_string();
        assert!(err.contains("none of its traces is inside it"), "{err}");
    }

    #[test]
    fn the_writer_refuses_what_the_format_cannot_hold() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("w.sgy");
        let write_one = |spec: &SegyWriteSpec, samples: &[f32]| {
            let t = SegyTrace {
                inline: 1,
                crossline: 1,
                x: 0.0,
                y: 0.0,
                samples,
            };
            write_segy(&path, spec, [t]).unwrap_err().to_string()
        };
        let int16 = SegyWriteSpec {
            format: SampleFormat::Int16,
            samples: 2,
            ..spec()
        };
        assert!(write_one(&int16, &[1.0, 32768.0])
            .contains("sample 2 is 32768, not a value of the 2-byte integer format"));
        assert!(write_one(&int16, &[1.5, 0.0]).contains("sample 1 is 1.5"));
        let ibm = SegyWriteSpec {
            format: SampleFormat::Ibm,
            samples: 2,
            ..spec()
        };
        assert!(write_one(&ibm, &[f32::NAN, 0.0]).contains("IBM floats cannot hold"));
        assert!(write_one(&ibm, &[0.0]).contains("has 1 samples, the file 2"));
        let far = SegyWriteSpec {
            samples: 1,
            ..spec()
        };
        let t = SegyTrace {
            inline: 1,
            crossline: 1,
            x: 3e7,
            y: 0.0,
            samples: &[0.0],
        };
        let err = write_segy(&path, &far, [t]).unwrap_err().to_string();
        assert!(
            err.contains(
                "x 30000000 does not fit a 4-byte integer with the coordinate scalar -100"
            ),
            "{err}"
        );
        assert!(write_segy(&path, &far, [])
            .unwrap_err()
            .to_string()
            .contains("no traces"));
        // Nothing is left behind.
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}
