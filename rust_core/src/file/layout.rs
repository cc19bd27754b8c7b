//! Where everything sits in an index file: the header, the section table, the sections.

use super::error::FormatError;
use crate::bits::{lines_for, Line};
use crate::keys::Domain;
use crate::tree::{Group, Layout};
use crate::wide::WideCascade;

/// The first eight bytes of every index file. The high first byte catches files mangled by
/// 7-bit or text-mode transfers.
pub const MAGIC: [u8; 8] = *b"\x8bBOXWOOD";
/// The format version this code writes and reads.
pub const FORMAT_VERSION: u32 = 2;
/// Written in the writer's byte order; reads back as this value only in the same order.
pub const BYTE_ORDER_TAG: u32 = 0x0102_0304;

pub const HEADER_BYTES: usize = 64;
/// The checksum of header and table, then 8 reserved bytes.
pub const CHECKSUM_BYTES: usize = 16;
pub const ENTRY_BYTES: usize = 32;
/// Every section starts on a multiple of this: a cache line, and the alignment of `Line`.
pub const SECTION_ALIGN: usize = 64;
/// More attachments than this are refused: they are for a caller's metadata, not data.
pub const MAX_ATTACHMENTS: usize = 64;

/// What a section holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[repr(u32)]
pub enum Kind {
    XKeys = 1,
    /// One level of the x root-search index (`index` = level, the largest first).
    XSearch = 2,
    YKeys = 3,
    YSearch = 4,
    /// Digit lines of one step of the count cascade (`index` = step).
    CountLines = 5,
    /// Superblock counts of one step of the count cascade (`index` = step).
    CountSupers = 6,
    /// Cascade lines of one level (`index` = level, `0..height`).
    Bits = 7,
    /// Row ids of one inner level, fast layout (`index` = level, `1..height`).
    LevelRows = 8,
    /// Row ids in x-rank order.
    LeafRows = 9,
    /// Block prefix sums of one level (`index` = level, `1..=height`).
    Weights = 10,
    /// Opaque bytes of the caller's (`index` = its position).
    Attachment = 11,
    /// Keyed trees: where each key code's run starts in x-rank order (`K + 1` u32).
    KeyStarts = 12,
}

impl Kind {
    fn name(self) -> &'static str {
        match self {
            Kind::XKeys => "x keys",
            Kind::XSearch => "x search index",
            Kind::YKeys => "y keys",
            Kind::YSearch => "y search index",
            Kind::CountLines => "count cascade lines",
            Kind::CountSupers => "count cascade totals",
            Kind::Bits => "cascade bits",
            Kind::LevelRows => "level rows",
            Kind::LeafRows => "leaf rows",
            Kind::Weights => "weights",
            Kind::Attachment => "attachment",
            Kind::KeyStarts => "key offsets",
        }
    }

    /// The group whose first use checks the section; `None`: checked at load (the count
    /// path and the attachments).
    pub fn group(self) -> Option<Group> {
        match self {
            Kind::Bits => Some(Group::CascadeBits),
            Kind::LevelRows | Kind::LeafRows => Some(Group::Rows),
            Kind::Weights => Some(Group::Weights),
            _ => None,
        }
    }
}

/// How the weights' prefix sums are stored.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum WeightCode {
    None = 0,
    F64 = 1,
    I64 = 2,
    I128 = 3,
}

impl WeightCode {
    fn from_u8(v: u8) -> Option<Self> {
        [Self::None, Self::F64, Self::I64, Self::I128]
            .into_iter()
            .find(|c| *c as u8 == v)
    }

    fn value_bytes(self) -> usize {
        match self {
            WeightCode::None => 0,
            WeightCode::F64 | WeightCode::I64 => 8,
            WeightCode::I128 => 16,
        }
    }
}

/// The fixed part of the file: everything the section table is derived from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Header {
    pub n: u64,
    pub height: u32,
    pub layout: Layout,
    pub x_domain: Domain,
    pub y_domain: Domain,
    pub weights: WeightCode,
    /// Keyed trees (byte 36): x ordered by (key code, x), key offsets, no x search index.
    pub keyed: bool,
    pub sections: u32,
    pub file_len: u64,
    pub presorts: u32,
    pub merge_passes: u32,
    pub elements_merged: u64,
}

fn domain_code(d: Domain) -> u8 {
    match d {
        Domain::F64 => 1,
        Domain::I64 => 2,
    }
}

fn domain_from(v: u8, axis: &str) -> Result<Domain, FormatError> {
    match v {
        1 => Ok(Domain::F64),
        2 => Ok(Domain::I64),
        _ => Err(FormatError::Corrupt(format!(
            "unknown {axis} domain code {v}"
        ))),
    }
}

fn layout_code(l: Layout) -> u8 {
    match l {
        Layout::Fast => 1,
        Layout::Compact => 2,
    }
}

fn u32_at(b: &[u8], at: usize) -> u32 {
    u32::from_le_bytes(b[at..at + 4].try_into().expect("4 bytes"))
}

fn u64_at(b: &[u8], at: usize) -> u64 {
    u64::from_le_bytes(b[at..at + 8].try_into().expect("8 bytes"))
}

impl Header {
    pub fn encode(&self) -> [u8; HEADER_BYTES] {
        let mut b = [0u8; HEADER_BYTES];
        b[0..8].copy_from_slice(&MAGIC);
        b[8..12].copy_from_slice(&FORMAT_VERSION.to_le_bytes());
        b[12..16].copy_from_slice(&BYTE_ORDER_TAG.to_le_bytes());
        b[16..24].copy_from_slice(&self.n.to_le_bytes());
        b[24..28].copy_from_slice(&self.height.to_le_bytes());
        b[28] = layout_code(self.layout);
        b[29] = domain_code(self.x_domain);
        b[30] = domain_code(self.y_domain);
        b[31] = self.weights as u8;
        b[32..36].copy_from_slice(&self.sections.to_le_bytes());
        b[36] = self.keyed as u8;
        // 37..40 reserved, zero.
        b[40..48].copy_from_slice(&self.file_len.to_le_bytes());
        b[48..52].copy_from_slice(&self.presorts.to_le_bytes());
        b[52..56].copy_from_slice(&self.merge_passes.to_le_bytes());
        b[56..64].copy_from_slice(&self.elements_merged.to_le_bytes());
        b
    }

    /// The header of `bytes`, checking magic, version and byte order first, in that order,
    /// so that the most useful message wins.
    pub fn decode(bytes: &[u8]) -> Result<Self, FormatError> {
        let short = FormatError::Truncated {
            expected: (HEADER_BYTES + CHECKSUM_BYTES) as u64,
            found: bytes.len() as u64,
        };
        if bytes.is_empty() {
            return Err(FormatError::Empty);
        }
        if bytes.len() < MAGIC.len() {
            // The start of the magic is the start of a cut-off index file.
            return Err(if MAGIC.starts_with(bytes) {
                short
            } else {
                FormatError::NotAnIndex
            });
        }
        if bytes[..MAGIC.len()] != MAGIC {
            return Err(FormatError::NotAnIndex);
        }
        if bytes.len() >= 12 && u32_at(bytes, 8) != FORMAT_VERSION {
            return Err(FormatError::UnsupportedVersion {
                found: u32_at(bytes, 8),
                supported: FORMAT_VERSION,
            });
        }
        if bytes.len() < HEADER_BYTES + CHECKSUM_BYTES {
            return Err(short);
        }
        let b = &bytes[..HEADER_BYTES];
        if u32_at(b, 12) != BYTE_ORDER_TAG {
            return Err(if u32_at(b, 12) == BYTE_ORDER_TAG.swap_bytes() {
                FormatError::WrongByteOrder
            } else {
                FormatError::Corrupt("unknown byte-order tag".into())
            });
        }
        if b[37..40] != [0u8; 3] {
            return Err(FormatError::Corrupt(
                "the reserved header bytes 37 to 39 are not zero".into(),
            ));
        }
        let keyed = match b[36] {
            0 => false,
            1 => true,
            v => return Err(FormatError::Corrupt(format!("unknown key flag {v}"))),
        };
        let layout = match b[28] {
            1 => Layout::Fast,
            2 => Layout::Compact,
            v => return Err(FormatError::Corrupt(format!("unknown layout code {v}"))),
        };
        let weights = WeightCode::from_u8(b[31])
            .ok_or_else(|| FormatError::Corrupt(format!("unknown weight code {}", b[31])))?;
        Ok(Header {
            n: u64_at(b, 16),
            height: u32_at(b, 24),
            layout,
            x_domain: domain_from(b[29], "x")?,
            y_domain: domain_from(b[30], "y")?,
            weights,
            keyed,
            sections: u32_at(b, 32),
            file_len: u64_at(b, 40),
            presorts: u32_at(b, 48),
            merge_passes: u32_at(b, 52),
            elements_merged: u64_at(b, 56),
        })
    }

    /// The sections the header calls for, in file order, without the attachments: the
    /// count path first (what a load checks), then each group checked before first use.
    pub fn tree_sections(&self) -> Vec<Expected> {
        let n = self.n as usize;
        let h = self.height as usize;
        let mut out = Vec::new();
        for (keys, search) in [(Kind::XKeys, Kind::XSearch), (Kind::YKeys, Kind::YSearch)] {
            out.push(Expected::new(keys, 0, n * 8));
            if keys == Kind::XKeys && self.keyed {
                // The one section whose length the table gives: 4 (K + 1) bytes.
                out.push(Expected::variable(Kind::KeyStarts, 0));
                continue;
            }
            let levels = crate::search::level_lines(n);
            out.extend(
                (levels.iter().enumerate()).map(|(l, &lines)| Expected::new(search, l, lines * 64)),
            );
        }
        let (lines, supers) = WideCascade::step_lens(n);
        for step in 0..WideCascade::steps_for(h) {
            out.push(Expected::new(Kind::CountLines, step, lines * 64));
            out.push(Expected::new(Kind::CountSupers, step, supers * 64));
        }
        let line_bytes = lines_for(n) * std::mem::size_of::<Line>();
        out.extend((0..h).map(|l| Expected::new(Kind::Bits, l, line_bytes)));
        if self.layout == Layout::Fast {
            out.extend((1..h).map(|l| Expected::new(Kind::LevelRows, l, n * 4)));
        }
        out.push(Expected::new(Kind::LeafRows, 0, n * 4));
        let w = self.weights.value_bytes();
        if w > 0 {
            out.extend((1..=h).map(|l| Expected::new(Kind::Weights, l, n * w)));
        }
        out
    }
}

/// A section the header calls for; attachments have no fixed length.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Expected {
    pub kind: Kind,
    pub index: usize,
    pub len: Option<usize>,
}

impl Expected {
    pub fn new(kind: Kind, index: usize, len: usize) -> Self {
        Expected {
            kind,
            index,
            len: Some(len),
        }
    }

    pub fn attachment(index: usize) -> Self {
        Self::variable(Kind::Attachment, index)
    }

    /// A section whose length the table gives.
    pub fn variable(kind: Kind, index: usize) -> Self {
        Expected {
            kind,
            index,
            len: None,
        }
    }

    pub fn name(&self) -> String {
        match self.kind {
            Kind::Bits | Kind::LevelRows | Kind::Weights | Kind::XSearch | Kind::YSearch => {
                format!("'{} of level {}'", self.kind.name(), self.index)
            }
            Kind::CountLines | Kind::CountSupers => {
                format!("'{} of step {}'", self.kind.name(), self.index)
            }
            Kind::Attachment => format!("'attachment {}'", self.index),
            _ => format!("'{}'", self.kind.name()),
        }
    }
}

/// One row of the section table.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Entry {
    pub kind: u32,
    pub index: u32,
    pub offset: u64,
    pub len: u64,
    pub checksum: u64,
}

impl Entry {
    pub fn encode(&self) -> [u8; ENTRY_BYTES] {
        let mut b = [0u8; ENTRY_BYTES];
        b[0..4].copy_from_slice(&self.kind.to_le_bytes());
        b[4..8].copy_from_slice(&self.index.to_le_bytes());
        b[8..16].copy_from_slice(&self.offset.to_le_bytes());
        b[16..24].copy_from_slice(&self.len.to_le_bytes());
        b[24..32].copy_from_slice(&self.checksum.to_le_bytes());
        b
    }

    pub fn decode(b: &[u8]) -> Self {
        Entry {
            kind: u32_at(b, 0),
            index: u32_at(b, 4),
            offset: u64_at(b, 8),
            len: u64_at(b, 16),
            checksum: u64_at(b, 24),
        }
    }
}

/// Where the first section may start, for a table of `sections` entries.
pub fn data_start(sections: usize) -> usize {
    align_up(HEADER_BYTES + CHECKSUM_BYTES + sections * ENTRY_BYTES)
}

pub fn align_up(v: usize) -> usize {
    v.div_ceil(SECTION_ALIGN) * SECTION_ALIGN
}

/// The checksum stored after the header: XXH3-64 of the header and the table together.
pub fn header_checksum(header: &[u8], table: &[u8]) -> u64 {
    let mut h = xxhash_rust::xxh3::Xxh3::new();
    h.update(header);
    h.update(table);
    h.digest()
}

pub fn section_checksum(bytes: &[u8]) -> u64 {
    xxhash_rust::xxh3::xxh3_64(bytes)
}

/// Recompute every section checksum the table lists, then the header checksum, so that
/// bytes changed on purpose get past the checksums to the structural checks behind them.
/// Entries that point outside `bytes` are left as they are; never panics.
pub fn rehash(bytes: &mut [u8]) {
    let table_start = HEADER_BYTES + CHECKSUM_BYTES;
    if bytes.len() < table_start {
        return;
    }
    let listed = u32_at(bytes, 32) as usize;
    let count = listed.min((bytes.len() - table_start) / ENTRY_BYTES);
    for i in 0..count {
        let at = table_start + i * ENTRY_BYTES;
        let e = Entry::decode(&bytes[at..at + ENTRY_BYTES]);
        let section = usize::try_from(e.offset).ok().and_then(|start| {
            let end = start.checked_add(usize::try_from(e.len).ok()?)?;
            bytes.get(start..end)
        });
        if let Some(section) = section {
            let sum = section_checksum(section);
            bytes[at + 24..at + 32].copy_from_slice(&sum.to_le_bytes());
        }
    }
    let table_end = table_start + count * ENTRY_BYTES;
    let sum = header_checksum(&bytes[..HEADER_BYTES], &bytes[table_start..table_end]);
    bytes[HEADER_BYTES..HEADER_BYTES + 8].copy_from_slice(&sum.to_le_bytes());
}
