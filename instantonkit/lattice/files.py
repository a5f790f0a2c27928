"""Lattice files: numpy ``.npz`` with the generation parameters, and ILDG (LIME records) for SU(3).

ILDG layout written and read here (the open ILDG/LIME standard, from memory; no other
reader was run, so tests/test_io.py checks the bytes against this description, and the round trip):

* A LIME file is a sequence of records.  Each record has a 144-byte big-endian header: magic number
  ``0x456789ab`` (uint32), format version ``1`` (uint16), a 16-bit flag word whose top bit is MB
  (message begin) and next bit ME (message end), the data length in bytes (uint64) and a 128-byte
  NUL-padded ASCII type string; the data follow, padded with zeros to a multiple of 8 bytes.
* Records, in one message: ``ildg-format`` (XML: field ``su3gauge``, precision ``64``, ``lx ly lz lt``),
  ``ildg-binary-data`` (big-endian IEEE float64; sites with t slowest, then z, y, x fastest; at each
  site the directions x, y, z, t; each link a 3 x 3 complex matrix, row-major, (re, im) pairs) and
  optionally ``ildg-data-lfn`` (the logical file name).  instantonkit adds the description of the
  field (JSON, the field's ``record()`` hook: kind, centres, sizes, orientations, for ADHM data Lambda
  and B in full precision, for complex SU(N) ADHM data B1, B2, I, J as real and imaginary parts, gauge,
  chirality) as a message of its own with one record
  ``instantonkit-field``, and its JSON metadata (shape, spacing, origin, group, embedding, boundary,
  quality figures) as another with one record ``instantonkit-metadata``; readers of the standard
  skip both.  npz files hold the same two JSON strings as the arrays ``field`` and ``metadata``.

Our link arrays are ``(L1, L2, L3, L4, 4, N, N)`` with ``(n1, n2, n3, n4) = (x, y, z, t)``, so the
binary payload is the array transposed to ``(t, z, y, x, mu, a, b)``.  Writes go to a temporary file
in the target directory that replaces the target only when complete (``os.replace``), is removed when
the write is interrupted (an exception, SIGTERM, SIGHUP) and, after SIGKILL, by the next save into that
directory; files get mode ``0o666 & ~umask`` and errors name the target (`instantonkit.core._atomic`).
The format follows the extension (``.npz``; ``.ildg`` or ``.lime``) unless given.
"""

from __future__ import annotations

import json
import os
import re
import struct
import zipfile
from typing import Any

import numpy as np

from ..core import _validate as _v
from ..core._atomic import atomic_write
from ..core._links import check_finite as _check_finite
from ..core._links import check_links as _check_link_values
from ..core._links import links_shape

__all__ = [
    "save_lattice",
    "load_lattice",
    "read_lime_records",
    "read_description",
    "LIME_MAGIC",
    "LIME_HEADER_BYTES",
    "EXTENSIONS",
]

LIME_MAGIC = 0x456789AB
LIME_VERSION = 1
LIME_HEADER_BYTES = 144
_MB, _ME = 0x8000, 0x4000
_TYPE_BYTES = 128
_NPZ_VERSION = 1
_META_TYPE = "instantonkit-metadata"
_FIELD_TYPE = "instantonkit-field"
_FORMATS = ("npz", "ildg")


def _atomic_write(path, write):
    """Call ``write(fileobj)`` on a temporary file beside ``path``, then rename it onto ``path`` (`._atomic`)."""
    atomic_write(path, write)


#: Extensions that name a format (compared in lower case).
EXTENSIONS = {".npz": "npz", ".ildg": "ildg", ".lime": "ildg"}


def _choose_format(path, format):
    """The format to write: ``format`` when given (it must agree with a known extension), else the extension's."""
    ext = os.path.splitext(os.fspath(path))[1].lower()
    known = EXTENSIONS.get(ext)
    if format is None:
        if known is None:
            raise ValueError(
                f"cannot tell the format of {os.fspath(path)!r} from its extension {ext or '(none)'!r}: name the "
                f"file *.npz (npz) or *.ildg / *.lime (ildg), or pass format= one of {_FORMATS}"
            )
        return known
    if format not in _FORMATS:
        raise ValueError(f"format must be one of {_FORMATS}; found {format!r}")
    if known is not None and known != format:
        raise ValueError(
            f"format {format!r} does not match the extension {ext!r} of {os.fspath(path)!r}, which means "
            f"{known!r}: change the name or the format"
        )
    return format


def check_links(links):
    """Validate link variables: shape (L1, L2, L3, L4, 4, N, N) and complex dtype; returns the array."""
    u = links if isinstance(links, np.memmap) else np.asarray(links)
    if u.ndim != 7 or u.shape[4] != 4 or u.shape[5] != u.shape[6]:
        raise ValueError(f"links must have shape (L1, L2, L3, L4, 4, N, N); found {u.shape}")
    if not np.iscomplexobj(u):
        raise TypeError(f"links must be complex; found dtype {u.dtype}")
    return u


# -- LIME -------------------------------------------------------------------------------------------


def _lime_header(type_str: str, length: int, mb: bool, me: bool) -> bytes:
    t = type_str.encode("ascii")
    if len(t) >= _TYPE_BYTES:
        raise ValueError(f"LIME type string must be shorter than {_TYPE_BYTES} bytes; found {len(t)}")
    flags = (_MB if mb else 0) | (_ME if me else 0)
    return struct.pack(">IHHQ", LIME_MAGIC, LIME_VERSION, flags, length) + t.ljust(_TYPE_BYTES, b"\0")


def _pad(n: int) -> int:
    return (-n) % 8


def _write_record(fh, type_str, payload: bytes, mb: bool, me: bool):
    fh.write(_lime_header(type_str, len(payload), mb, me))
    fh.write(payload)
    fh.write(b"\0" * _pad(len(payload)))


def read_lime_records(path) -> list[dict]:
    """Headers of all LIME records in a file: list of dicts type, offset (of the data), length, mb, me, version.

    Raises ValueError for a bad magic number, a header cut short or data running past the end of the file.
    """
    size = os.path.getsize(path)
    out = []
    with open(path, "rb") as fh:
        pos = 0
        while pos < size:
            head = fh.read(LIME_HEADER_BYTES)
            if len(head) < LIME_HEADER_BYTES:
                raise ValueError(
                    f"truncated LIME file {os.fspath(path)!r}: record header at byte {pos} has "
                    f"{len(head)} of {LIME_HEADER_BYTES} bytes"
                )
            magic, version, flags, length = struct.unpack(">IHHQ", head[:16])
            if magic != LIME_MAGIC:
                raise ValueError(f"not a LIME record at byte {pos}: magic {magic:#010x}, expected {LIME_MAGIC:#010x}")
            type_str = head[16:].split(b"\0", 1)[0].decode("ascii", errors="replace")
            data_at = pos + LIME_HEADER_BYTES
            end = data_at + length + _pad(length)
            if data_at + length > size:
                raise ValueError(
                    f"truncated LIME file: record {type_str!r} declares {length} data bytes at byte {data_at} "
                    f"but the file has {size} bytes"
                )
            out.append(
                {
                    "type": type_str,
                    "offset": data_at,
                    "length": length,
                    "mb": bool(flags & _MB),
                    "me": bool(flags & _ME),
                    "version": version,
                }
            )
            pos = min(end, size)
            fh.seek(pos)
    return out


def _ildg_xml(shape, precision: int = 64) -> str:
    lx, ly, lz, lt = shape
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<ildgFormat xmlns="http://www.lqcd.org/ildg" '
        'xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance" '
        'xsi:schemaLocation="http://www.lqcd.org/ildg http://www.lqcd.org/ildg/filefmt.xsd">\n'
        "  <version>1.0</version>\n"
        "  <field>su3gauge</field>\n"
        f"  <precision>{precision}</precision>\n"
        f"  <lx>{lx}</lx>\n  <ly>{ly}</ly>\n  <lz>{lz}</lz>\n  <lt>{lt}</lt>\n"
        "</ildgFormat>\n"
    )


def _parse_ildg_xml(text: str) -> dict:
    def tag(name):
        m = re.search(rf"<{name}>\s*([^<]*?)\s*</{name}>", text)
        if m is None:
            raise ValueError(f"ildg-format record has no <{name}> element")
        return m.group(1)

    info = {"field": tag("field"), "precision": int(tag("precision"))}
    for k in ("lx", "ly", "lz", "lt"):
        info[k] = int(tag(k))
    return info


def _save_ildg(fh, u, metadata, lfn, description=None):
    if u.shape[-1] != 3:
        raise ValueError(
            f"ILDG stores SU(3) links (3 x 3); found {u.shape[-1]} x {u.shape[-1]} (make the start with group='su3')"
        )
    shape = u.shape[:4]
    nbytes = int(np.prod(shape)) * 4 * 9 * 16
    _write_record(fh, "ildg-format", _ildg_xml(shape).encode(), mb=True, me=False)
    fh.write(_lime_header("ildg-binary-data", nbytes, mb=False, me=lfn is None))
    for t in range(shape[3]):  # t slowest; within a time slice (z, y, x, mu, a, b)
        block = np.asarray(u[:, :, :, t])
        if _streamed(u):
            _finite_block(u, block)
        block = block.transpose(2, 1, 0, 3, 4, 5)
        fh.write(np.ascontiguousarray(block, dtype=">c16").tobytes())
    fh.write(b"\0" * _pad(nbytes))
    if lfn is not None:
        _write_record(fh, "ildg-data-lfn", str(lfn).encode(), mb=False, me=True)
    if description is not None:
        _write_record(fh, _FIELD_TYPE, json.dumps(description, sort_keys=True).encode(), mb=True, me=True)
    if metadata is not None:
        _write_record(fh, _META_TYPE, json.dumps(metadata, sort_keys=True).encode(), mb=True, me=True)


def _load_ildg(path, mmap: bool):
    recs = read_lime_records(path)
    types = [r["type"] for r in recs]
    for need in ("ildg-format", "ildg-binary-data"):
        if need not in types:
            raise ValueError(f"ILDG file has no {need!r} record; found records {types}")
    with open(path, "rb") as fh:

        def payload(rec):
            fh.seek(rec["offset"])
            return fh.read(rec["length"])

        fmt = recs[types.index("ildg-format")]
        info = _parse_ildg_xml(payload(fmt).decode("utf-8", errors="replace"))
        meta: dict[str, Any] = {"format": "ildg", "ildg": info}
        if "ildg-data-lfn" in types:
            meta["lfn"] = payload(recs[types.index("ildg-data-lfn")]).decode("utf-8", errors="replace")
        for rtype, key in ((_META_TYPE, "metadata"), (_FIELD_TYPE, "field")):
            if rtype in types:
                try:
                    meta[key] = json.loads(payload(recs[types.index(rtype)]).decode())
                except ValueError as err:
                    raise ValueError(f"corrupt {rtype} record: {err}") from err
        meta["field"] = meta.get("field")
    if info["field"] != "su3gauge":
        raise ValueError(f"ILDG field must be 'su3gauge'; found {info['field']!r}")
    if info["precision"] not in (32, 64):
        raise ValueError(f"ILDG precision must be 32 or 64; found {info['precision']}")
    dtype = np.dtype(">c16" if info["precision"] == 64 else ">c8")
    lx, ly, lz, lt = info["lx"], info["ly"], info["lz"], info["lt"]
    binrec = recs[types.index("ildg-binary-data")]
    expect = lx * ly * lz * lt * 4 * 9 * dtype.itemsize
    if binrec["length"] != expect:
        raise ValueError(
            f"ildg-binary-data has {binrec['length']} bytes; expected {expect} for {lx}x{ly}x{lz}x{lt} "
            f"at precision {info['precision']}"
        )
    raw = np.memmap(path, dtype=dtype, mode="r", offset=binrec["offset"], shape=(lt, lz, ly, lx, 4, 3, 3))
    view = raw.transpose(3, 2, 1, 0, 4, 5, 6)
    if mmap:
        return view, meta
    return np.ascontiguousarray(view, dtype=np.complex128), meta


# -- npz ----------------------------------------------------------------------------------------------


def _save_npz(fh, u, metadata, description=None):
    meta = json.dumps(metadata if metadata is not None else {}, sort_keys=True)
    extra = {} if description is None else {"field": np.array(json.dumps(description, sort_keys=True))}
    arrays = {"metadata": np.array(meta), "instantonkit_npz_version": np.array(_NPZ_VERSION), **extra}
    if not _streamed(u):
        np.savez(fh, links=np.asarray(u), **arrays)
        return
    # what np.savez writes (stored zip members "<name>.npy", zip64), the links streamed in slabs of
    # whole x1 slices (C order) and checked for finiteness as they are read
    with zipfile.ZipFile(fh, mode="w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        with zf.open("links.npy", "w", force_zip64=True) as out:
            np.lib.format.write_array_header_1_0(out, np.lib.format.header_data_from_array_1_0(u))
            step = max(1, _SLAB_BYTES // max(1, u[0].nbytes))
            for i in range(0, u.shape[0], step):
                out.write(_finite_block(u, np.asarray(u[i : i + step])).tobytes())
        for name, value in arrays.items():
            with zf.open(name + ".npy", "w", force_zip64=True) as out:
                np.lib.format.write_array(out, value, allow_pickle=False)


#: Bytes of a memory map read at once when it is written (the links of whole x1 slices).
_SLAB_BYTES = 1 << 26


def _streamed(u) -> bool:
    """True for links written in slabs and checked for finiteness as they are read: C-ordered memory maps."""
    return isinstance(u, np.memmap) and u.flags.c_contiguous


def _finite_block(u, block):
    """``block`` (a part of the links ``u`` just read) when finite, else the error of `check_finite` on all of ``u``.

    The error counts every NaN or inf entry of ``u`` and names the first sites, as the check before writing did.
    """
    if not np.isfinite(block).all():
        _check_finite(u)
    return block


def _load_npz(path):
    try:
        with np.load(path, allow_pickle=False) as z:
            if "links" not in z.files:
                raise ValueError(f"npz lattice file has no 'links' array; found {z.files}")
            links = z["links"]
            meta = json.loads(str(z["metadata"])) if "metadata" in z.files else {}
            desc = json.loads(str(z["field"])) if "field" in z.files else None
    except (zipfile.BadZipFile, EOFError, OSError, KeyError) as err:
        raise ValueError(
            f"corrupt or truncated npz lattice file {os.fspath(path)!r}: {type(err).__name__}: {err}"
        ) from err
    except ValueError as err:
        if "npz lattice file" in str(err):
            raise
        raise ValueError(f"corrupt or truncated npz lattice file {os.fspath(path)!r}: {err}") from err
    check_links(links)
    return links, {"format": "npz", "metadata": meta, "field": desc}


# -- public ---------------------------------------------------------------------------------------------


def save_lattice(
    path,
    links,
    format: str | None = None,
    metadata: dict | None = None,
    *,
    lfn: str | None = None,
    description: dict | None = None,
) -> None:
    """Write link variables (L1, L2, L3, L4, 4, N, N) to ``path`` atomically, with what made them.

    format 'npz': the array (bit-exact), ``metadata`` and ``description`` (JSON strings); 'ildg':
    SU(3) links as LIME records ildg-format, ildg-binary-data (big-endian float64) and, if given,
    ildg-data-lfn ``lfn``; ``description`` and ``metadata`` then go into extra instantonkit-field and
    instantonkit-metadata records (messages of their own).  np.memmap inputs are streamed one time
    slice at a time.  Pass a lattice start (``lattice.lattice_start(...)``, an object with ``links``
    and ``report.as_metadata()``) as ``links`` to store its report and field description
    (the report's 'field' entry, from the field's ``record()`` hook) without naming them.

    Args:
      path: file to write (written to a temporary file in the same directory, then renamed; mode
        0o666 & ~umask; leftovers of writers killed by SIGKILL in that directory are removed first).
      links: (L1, L2, L3, L4, 4, N, N) complex array (numpy or np.memmap; N = 3 for 'ildg'), or a
        lattice start with ``.links`` and ``.report``.
      format: 'npz' or 'ildg'; None (default): from the extension, '.npz' -> 'npz', '.ildg' or
        '.lime' -> 'ildg'.
      metadata: optional JSON-serialisable dict stored with the links (default: the start's report).
      lfn: optional logical file name (ILDG only).
      description: optional JSON-serialisable description of the field (default: ``metadata['field']``
        when that is a dict, which is then stored only as the description, read back as info['field']); `instantonkit.lattice.references.field_from_record`
        rebuilds the field from it.
    Returns:
      None.
    Raises:
      ValueError: unknown format, an extension the format contradicts (``x.ildg`` with format='npz'),
        an unknown extension without a format, links of the wrong shape (or not 3 x 3 for 'ildg').
      TypeError: a path that is not str or os.PathLike, non-complex links, metadata that is not a
        dict or not JSON-serialisable, a format that is not text.
      ValueError: an empty path, links with NaN or inf entries (counted and located: damaged data are
        never written) or too large for this machine's memory.
      OSError: a missing directory, a refused permission, a full disk (FileNotFoundError,
        PermissionError, ...), naming ``path``; no temporary file is left.
    """
    path = _v.file_path("path", path)
    if format is not None and not isinstance(format, str):
        raise TypeError(f"format must be one of {_FORMATS} or None; found {format!r} ({type(format).__name__})")
    if metadata is not None and not isinstance(metadata, dict):
        raise TypeError(
            f"metadata must be a dict (JSON-serialisable) or None; found {metadata!r} ({type(metadata).__name__})"
        )
    format = _choose_format(path, format)
    report = getattr(links, "report", None)
    if report is not None and hasattr(links, "links") and hasattr(report, "as_metadata"):
        # a lattice start (duck-typed: io sits below lattice)
        metadata = report.as_metadata() if metadata is None else metadata
        links = links.links
    u = links_shape(links)  # shape, dtype, and a size this machine can hold
    if not (_streamed(u) and (format == "npz" or u.shape[-1] == 3)):
        u = _check_finite(u)  # a memory map is checked as it is written: one pass over the file
    if format == "ildg" and u.shape[-1] != 3:
        raise ValueError(
            f"ILDG stores SU(3) links (3 x 3); found {u.shape[-1]} x {u.shape[-1]} (make the start with group='su3')"
        )
    if isinstance(metadata, dict) and isinstance(
        metadata.get("field"), dict
    ):  # a field record: stored as the description
        description = metadata["field"] if description is None else description
        metadata = {k: v for k, v in metadata.items() if k != "field"}
    for name, value in (("metadata", metadata), ("description", description)):
        if value is not None:
            try:
                json.dumps(value)
            except TypeError as err:
                raise TypeError(f"{name} must be JSON-serialisable: {err}") from err
    if format == "npz":
        _atomic_write(path, lambda fh: _save_npz(fh, u, metadata, description))
    else:
        _atomic_write(path, lambda fh: _save_ildg(fh, u, metadata, lfn, description))


def load_lattice(path, *, mmap: bool = False, project: bool = False):
    """Read a lattice file written by `save_lattice` (or any ILDG file); returns (links, info).

    The format is recognised from the first bytes (zip: npz; LIME magic: ILDG).  info holds 'format',
    'metadata', 'field' (the field description, None when the file has none; rebuild the field with
    `instantonkit.lattice.references.field_from_record`) and for ILDG also 'ildg' with the XML fields and
    'lfn' when present.  With
    ``mmap=True`` an ILDG file is returned as a read-only big-endian memory-mapped view (no copy).
    Every link is checked (`instantonkit.core._links.check_links`, time slab by time slab): NaN or inf
    entries (a damaged payload) and links that are not SU(N) within 1e-8 are refused, naming the file;
    ``project=True`` returns the links projected onto SU(N) instead (e.g. for single-precision files,
    whose rounding, ~1e-7, lies above the tolerance).

    Args:
      path: an npz or LIME/ILDG file.
      mmap: return ILDG links as a read-only memory map instead of reading them.
      project: return the links projected onto SU(N) (a complex128 array) instead of refusing links
        beyond the unitarity tolerance.
    Returns:
      (links, info): links (L1, L2, L3, L4, 4, N, N) complex128 (numpy array or memory map) and the
      dict info ('format', 'metadata', 'field', and for ILDG 'ildg' and 'lfn' when present).
    Raises:
      TypeError / ValueError: a path that is not a non-empty str or os.PathLike.
      ValueError: a file that is neither format, truncated or corrupt; links with NaN or inf entries
        (counted and located) or not in SU(N) within 1e-8 (the worst link named).
    """
    path = _v.file_path("path", path)
    links, info = _read_links(path, mmap)
    try:
        links = _check_link_values(links, name=f"links of the file at path {path!r}", project=project)
    except ValueError as err:
        if "must be SU(" not in str(err):
            raise
        raise ValueError(f"{err}; or pass project=True to load_lattice") from None
    return links, info


def _read_links(path, mmap):
    """(links, info) of an npz or LIME/ILDG file, unchecked values."""
    with open(path, "rb") as fh:
        head = fh.read(4)
    if head[:2] == b"PK":
        return _load_npz(path)
    if len(head) == 4 and struct.unpack(">I", head)[0] == LIME_MAGIC:
        return _load_ildg(path, mmap)
    raise ValueError(f"{path!r} is neither an npz nor a LIME/ILDG lattice file (first bytes {head!r})")


def read_description(path) -> dict:
    """The field description and metadata of a lattice file without reading the links: {'field', 'metadata', 'format'}.

    Args:
      path: an npz or LIME/ILDG file written by `save_lattice`.
    Returns:
      dict with 'format', 'metadata' (dict, empty when absent) and 'field' (dict or None).
    Raises:
      ValueError: a file that is neither format, truncated or corrupt.
    """
    path = os.fspath(path)
    with open(path, "rb") as fh:
        head = fh.read(4)
    if head[:2] == b"PK":
        try:
            with np.load(path, allow_pickle=False) as z:
                meta = json.loads(str(z["metadata"])) if "metadata" in z.files else {}
                desc = json.loads(str(z["field"])) if "field" in z.files else None
        except (zipfile.BadZipFile, EOFError, OSError, KeyError, ValueError) as err:
            raise ValueError(f"corrupt or truncated npz lattice file {path!r}: {type(err).__name__}: {err}") from err
        return {"format": "npz", "metadata": meta, "field": desc}
    _, info = _read_links(path, True)
    return {"format": "ildg", "metadata": info.get("metadata", {}), "field": info.get("field")}
