"""A small ELF reader for the packaging tests: section names and required glibc versions.

Only what the tests ask of a shared library, read by the layouts of the System V ABI
(ELF-64 header and section header table) and of the GNU symbol versioning extension
(``SHT_GNU_verneed``, as the Linux Standard Base describes it). 64-bit little-endian only,
which covers x86-64 and aarch64 Linux.
"""

from __future__ import annotations

import re
import struct
from dataclasses import dataclass

ELF_MAGIC = b"\x7fELF"
#: e_ident[EI_CLASS] and e_ident[EI_DATA] of a 64-bit little-endian file.
ELFCLASS64, ELFDATA2LSB = 2, 1
#: The ELF-64 header after e_ident, and one section header.
_HEADER = struct.Struct("<HHIQQQIHHHHHH")
_SECTION = struct.Struct("<IIQQQQIIQQ")
#: Verneed and Vernaux entries of SHT_GNU_verneed.
_VERNEED = struct.Struct("<HHIII")
_VERNAUX = struct.Struct("<IHHII")
SHT_GNU_VERNEED = 0x6FFFFFFE
#: Section names that hold debug information (DWARF, plain and compressed).
DEBUG_PREFIXES = (".debug", ".zdebug")


class NotElf64Error(ValueError):
    """The bytes are not a 64-bit little-endian ELF file."""


@dataclass(frozen=True)
class Section:
    name: str
    type: int
    offset: int
    size: int
    link: int
    info: int


def sections(data: bytes) -> list[Section]:
    """The section header table of ``data``, with names from the section name table."""
    if data[:4] != ELF_MAGIC or data[4] != ELFCLASS64 or data[5] != ELFDATA2LSB:
        raise NotElf64Error("not a 64-bit little-endian ELF file")
    fields = _HEADER.unpack_from(data, 16)
    shoff, shentsize, shnum, shstrndx = fields[5], fields[10], fields[11], fields[12]
    raw = [_SECTION.unpack_from(data, shoff + i * shentsize) for i in range(shnum)]
    names = raw[shstrndx]
    names_at = names[4]
    return [Section(_cstring(data, names_at + s[0]), s[1], s[4], s[5], s[6], s[7]) for s in raw]


def debug_sections(data: bytes) -> list[str]:
    """Names of the sections that carry debug information."""
    return [s.name for s in sections(data) if s.name.startswith(DEBUG_PREFIXES)]


def needed_versions(data: bytes) -> dict[str, list[str]]:
    """Symbol versions the file needs, by library: ``{"libc.so.6": ["GLIBC_2.2.5", ...]}``."""
    table = sections(data)
    needed: dict[str, list[str]] = {}
    for sec in table:
        if sec.type != SHT_GNU_VERNEED:
            continue
        strings = table[sec.link].offset
        at = sec.offset
        for _ in range(sec.info):  # sh_info: the number of Verneed entries
            _, count, file_name, aux, next_entry = _VERNEED.unpack_from(data, at)
            names = needed.setdefault(_cstring(data, strings + file_name), [])
            aux_at = at + aux
            for _ in range(count):
                _, _, _, name, next_aux = _VERNAUX.unpack_from(data, aux_at)
                names.append(_cstring(data, strings + name))
                aux_at += next_aux
            at += next_entry
    return needed


def glibc_floor(data: bytes) -> tuple[int, ...]:
    """The newest ``GLIBC_x.y`` version the file needs: the oldest glibc it runs on."""
    versions = [
        tuple(int(part) for part in match.group(1).split("."))
        for names in needed_versions(data).values()
        for name in names
        if (match := re.fullmatch(r"GLIBC_(\d+(?:\.\d+)*)", name))
    ]
    if not versions:
        raise ValueError("the file needs no versioned glibc symbol")
    return max(versions)


def _cstring(data: bytes, at: int) -> str:
    return data[at : data.index(b"\0", at)].decode("ascii")
