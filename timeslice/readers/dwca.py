"""Delivered record files to one table of strings: delimited text, gzip, zip, Darwin Core Archive.

Used by :mod:`timeslice.readers.occurrences`. Every bad file raises
:class:`timeslice.errors.InputFileError` with a one-line message that names the file (and the
member of an archive), what was expected and what was found.

Darwin Core Archives follow the Darwin Core text guide (TDWG 2009, "Darwin Core Text Guide",
https://dwc.tdwg.org/text/): ``meta.xml`` describes a core file and optional extension files,
each with its delimiter (``fieldsTerminatedBy``, default ","), quote character
(``fieldsEnclosedBy``, default '"'), encoding (default UTF-8), number of header lines to skip
(``ignoreHeaderLines``, default 0), and one ``<field index=... term=...>`` per column (or a
``default`` value for a column the file does not hold). Extension rows point to their core row
through the ``<coreid index=...>`` column. The defaults are from that guide (from memory).
"""

from __future__ import annotations

import bz2
import csv
import gzip
import io
import lzma
import posixpath
import re
import zipfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from xml.etree import ElementTree as ET

import numpy as np
import pandas as pd

from timeslice.errors import InputFileError

__all__ = ["RawTable", "decode", "load_table", "sniff", "term_name"]

#: Table members a zip without meta.xml may hold, by file name ending.
_TABLE_ENDINGS = (".csv", ".tsv", ".txt", ".tab", ".csv.gz", ".txt.gz", ".tsv.gz")
#: Members of aggregator downloads that are never the records.
_NOT_RECORDS = {"citations.txt", "rights.txt", "readme.txt", "license.txt", "licence.txt",
                "metadata.txt", "citation.txt"}
_SEP_NAMES = {"\t": "tab", ",": "comma", ";": "semicolon", "|": "pipe"}
_ROW_OCCURRENCE = "occurrence"
_MAX_BYTES = 4 * 1024**3


@dataclass
class RawTable:
    """A delivered table as strings, with how it was read.

    Parameters
    ----------
    data : pandas.DataFrame
        One column per file column (Darwin Core Archives: the term's local name, e.g.
        ``decimalLatitude``) plus ``__line__``, the 1-based line of the record in its file.
    source : str
        The file (and archive member) named in messages.
    fmt : str
        What the file was read as (its format, in words).
    encoding : str
        The text encoding used.
    delimiter : str
        The column delimiter.
    notes : list of str
        Further remarks on the reading (fallback encodings...).
    """

    data: pd.DataFrame
    source: str
    fmt: str
    encoding: str
    delimiter: str
    notes: list[str] = field(default_factory=list)

    def describe(self) -> str:
        """One line: format, encoding and delimiter, for the cleaning table.

        Returns
        -------
        str
        """
        parts = [self.fmt, f"encoding {self.encoding}", f"{_SEP_NAMES.get(self.delimiter, repr(self.delimiter))}-separated"]
        return "; ".join(parts + self.notes)


# ---------------------------------------------------------------------------------------------
# bytes
# ---------------------------------------------------------------------------------------------
def _clip(items, n: int = 4, width: int = 40) -> str:
    items = [str(x) if len(str(x)) <= width else str(x)[: width - 1] + "…" for x in items]
    more = f" and {len(items) - n} more" if len(items) > n else ""
    return ", ".join(items[:n]) + more


def _decompress(data: bytes, name: str) -> tuple[bytes, str | None]:
    """Undo gzip, bzip2 or xz compression (told by the magic bytes, not the file name)."""
    kinds = ((b"\x1f\x8b", "gzip", gzip.decompress), (b"BZh", "bzip2", bz2.decompress),
             (b"\xfd7zXZ\x00", "xz", lzma.decompress))
    for magic, kind, fn in kinds:
        if data.startswith(magic):
            try:
                return fn(data), kind
            except (OSError, EOFError, zlib.error, lzma.LZMAError, ValueError) as err:
                raise InputFileError(
                    f"{name}: {kind}-compressed but cannot be decompressed ({err}); the file is "
                    "probably truncated: download it again") from err
    return data, None


def decode(data: bytes, name: str, *, declared: str | None = None) -> tuple[str, str, list[str]]:
    """Decode bytes: strict UTF-8 (BOM or not), else Windows-1252, else Latin-1, over the whole file.

    A declared encoding (``meta.xml``) is tried first; when the bytes do not decode with it the
    same fallback applies and a note says so. UTF-16 is recognised by its byte-order mark.

    Parameters
    ----------
    data : bytes
        The file's bytes.
    name : str
        The file named in messages.
    declared : str, optional
        The encoding the archive declares.

    Returns
    -------
    text, encoding, notes : str, str, list of str
        The text, the name of the encoding used and notes.
    """
    notes: list[str] = []
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return data.decode("utf-16"), "UTF-16", notes
        except UnicodeDecodeError as err:
            raise InputFileError(f"{name}: starts with a UTF-16 byte-order mark but is not valid "
                                 f"UTF-16 ({err.reason} at byte {err.start}); re-save it as UTF-8") from err
    utf16 = _utf16_without_bom(data)
    if utf16 is not None:
        try:
            return data.decode(utf16), f"{utf16.upper()} (no byte-order mark)", notes
        except UnicodeDecodeError as err:
            raise InputFileError(f"{name}: looks like UTF-16 without a byte-order mark but is not "
                                 f"valid {utf16.upper()} ({err.reason} at byte {err.start}); "
                                 "re-save it as UTF-8") from err
    if b"\x00" in data[:65536]:
        raise InputFileError(f"{name}: holds NUL bytes, so it is not a delimited text file "
                             "(a spreadsheet or other binary file?); export it as CSV or tab-separated text")
    bom = data.startswith(b"\xef\xbb\xbf")
    body = data[3:] if bom else data
    want = (declared or "").strip().lower().replace("_", "-")
    if want and want not in ("utf-8", "utf8"):
        try:
            return body.decode(want), declared.strip(), notes
        except LookupError:
            notes.append(f"declared encoding {declared!r} unknown")
        except UnicodeDecodeError:
            notes.append(f"not valid {declared} as declared")
    try:
        return body.decode("utf-8"), "UTF-8 with BOM" if bom else "UTF-8", notes
    except UnicodeDecodeError as err:
        line = data.count(b"\n", 0, err.start) + 1
        notes.append(f"not valid UTF-8 (first at line {line})")
    try:
        text = body.decode("cp1252")
        cp = any(0x80 <= b <= 0x9F for b in body)
        return text, "Windows-1252" if cp else "Latin-1", notes
    except UnicodeDecodeError:
        return body.decode("latin-1"), "Latin-1", notes


def _utf16_without_bom(data: bytes) -> str | None:
    """"utf-16-le" or "utf-16-be" for text saved as UTF-16 without a byte-order mark, else None.

    Text that is mostly ASCII has a NUL in every other byte when saved as UTF-16: at odd
    offsets in little-endian, at even offsets in big-endian (Unicode Standard, ch. 3, UTF-16
    encoding forms). A binary file has NULs at both.
    """
    head = data[:4096]
    if len(head) < 4:
        return None
    even, odd = head[0::2], head[1::2]
    nul_even, nul_odd = even.count(0) / len(even), odd.count(0) / len(odd)
    if nul_odd > 0.6 and nul_even < 0.05:
        return "utf-16-le"
    if nul_even > 0.6 and nul_odd < 0.05:
        return "utf-16-be"
    return None


# ---------------------------------------------------------------------------------------------
# delimited text
# ---------------------------------------------------------------------------------------------
def sniff(text: str) -> tuple[str, int]:
    """Delimiter and quoting of a text table, from its header line.

    The delimiter is the one of tab, comma, semicolon and pipe that the header line holds most
    often (tab first on ties). Tab-separated files are read without quote characters (the
    aggregators' tab-separated downloads do not quote, and hold stray double quotes inside
    fields) unless the header itself is quoted; the others with optional double quotes
    (RFC 4180).

    Parameters
    ----------
    text : str
        The decoded table.

    Returns
    -------
    delimiter, quoting : str, int
        The delimiter and a :mod:`csv` quoting constant.
    """
    header = next((ln for ln in text.splitlines() if ln.strip()), "")
    counts = {sep: header.count(sep) for sep in ("\t", ",", ";", "|")}
    sep = max(counts, key=lambda s: counts[s])  # dict order puts tab first on ties
    if counts[sep] == 0:
        sep = ","
    quoting = csv.QUOTE_MINIMAL
    if sep == "\t" and not header.lstrip().startswith('"'):
        quoting = csv.QUOTE_NONE
    return sep, quoting


def _parse(text: str, name: str, *, sep: str, quoting: int, quotechar: str = '"',
           skip: int = 0, header: bool = True) -> pd.DataFrame:
    """Parse delimited text as strings; ``__line__`` is the 1-based line in the file."""
    try:
        df = pd.read_csv(
            io.StringIO(text), sep=sep, dtype=str, keep_default_na=False, quoting=quoting,
            quotechar=quotechar or '"', skip_blank_lines=False, header=0 if header else None,
            skiprows=skip if skip else None, engine="c",
        )
    except pd.errors.EmptyDataError:
        return pd.DataFrame({"__line__": np.zeros(0, dtype=np.int64)})
    except (pd.errors.ParserError, ValueError) as err:
        msg = str(err).splitlines()[0] if str(err) else type(err).__name__
        m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", msg)
        how = f"{_SEP_NAMES.get(sep, repr(sep))}-separated, " + (
            "no quote character" if quoting == csv.QUOTE_NONE else f"fields may be enclosed in {quotechar}")
        if m:
            line = int(m.group(2)) + (skip if not header else 0)
            raise InputFileError(
                f"{name}: line {line} has {m.group(3)} fields where the header has {m.group(1)} "
                f"({how}); a delimiter or quote inside a field? fix that line or quote the field") from err
        raise InputFileError(f"{name}: not a readable table ({msg}; read as {how}); check the "
                             "delimiter and quoting") from err
    df = df.fillna("")
    if header:
        df.columns = [str(c).strip().lstrip("\ufeff") for c in df.columns]
    first = skip + (2 if header else 1)
    df["__line__"] = np.arange(first, len(df) + first, dtype=np.int64)
    cols = [c for c in df.columns if c != "__line__"]
    if cols:
        blank = (df[cols[0]].str.strip() == "").to_numpy().copy()
        if len(cols) > 1 and blank.any():
            blank &= (df[cols[1:]] == "").all(axis=1).to_numpy()
        df = df.loc[~blank].reset_index(drop=True)
    return df


def _text_table(data: bytes, name: str, fmt: str) -> RawTable:
    data, comp = _decompress(data, name)
    if comp:
        fmt = f"{comp}-compressed {fmt}"
    text, enc, notes = decode(data, name)
    if not text.strip():
        raise InputFileError(f"{name}: file is empty; expected a table with a header line")
    sep, quoting = sniff(text)
    df = _parse(text, name, sep=sep, quoting=quoting)
    return RawTable(df, name, fmt, enc, sep, notes)


# ---------------------------------------------------------------------------------------------
# Darwin Core Archive
# ---------------------------------------------------------------------------------------------
def term_name(term: str) -> str:
    """Local name of a term URI or prefixed term: ``http://rs.tdwg.org/dwc/terms/year`` -> ``year``.

    Parameters
    ----------
    term : str

    Returns
    -------
    str
    """
    t = str(term).strip()
    if "://" in t or t.startswith("urn:"):
        t = re.split(r"[/#:]", t.rstrip("/#"))[-1]
    return re.sub(r"^(dwc|dcterms|dc|gbif)[:]", "", t, flags=re.I)


def _unescape(value: str | None, default: str) -> str:
    if value is None:
        return default
    return value.replace("\\t", "\t").replace("\\n", "\n").replace("\\r", "\r").replace("&quot;", '"')


@dataclass
class _FileSpec:
    row_type: str
    locations: list[str]
    encoding: str
    sep: str
    quote: str
    skip: int
    id_index: int | None
    fields: list[tuple[int | None, str, str | None]]


def _spec(el: ET.Element, meta: str) -> _FileSpec:
    def local(tag: str) -> str:
        return tag.rsplit("}", 1)[-1]

    locations, fields, id_index = [], [], None
    for child in el.iter():
        tag = local(child.tag)
        if tag == "location" and child.text and child.text.strip():
            locations.append(child.text.strip())
        elif tag in ("id", "coreid") and child.get("index") is not None:
            id_index = int(child.get("index"))
        elif tag == "field":
            idx = child.get("index")
            fields.append((int(idx) if idx not in (None, "") else None, child.get("term", ""), child.get("default")))
    try:
        skip = int(el.get("ignoreHeaderLines", "0") or 0)
    except ValueError as err:
        raise InputFileError(f"{meta}: ignoreHeaderLines={el.get('ignoreHeaderLines')!r} is not a "
                             "whole number; fix meta.xml") from err
    return _FileSpec(
        row_type=term_name(el.get("rowType", "")).lower(), locations=locations,
        encoding=el.get("encoding") or "UTF-8", sep=_unescape(el.get("fieldsTerminatedBy"), ","),
        quote=_unescape(el.get("fieldsEnclosedBy"), '"'), skip=skip, id_index=id_index, fields=fields,
    )


def _member(zf: zipfile.ZipFile, names: list[str], base: str, location: str, label: str) -> str:
    """The zip member a meta.xml location names (relative to meta.xml's folder, else by file name)."""
    loc = location.replace("\\", "/")
    if "://" in loc:
        loc = loc.rstrip("/").rsplit("/", 1)[-1]
    cand = posixpath.normpath(posixpath.join(base, loc)) if base else posixpath.normpath(loc)
    if cand in names:
        return cand
    by_name = [n for n in names if posixpath.basename(n).lower() == posixpath.basename(loc).lower()]
    if len(by_name) == 1:
        return by_name[0]
    raise InputFileError(
        f"{label}: meta.xml names the file {location!r}, which is not in the zip (it holds "
        f"{_clip(names)}); re-export the archive")


def _read_spec(zf, names, base, spec: _FileSpec, label: str) -> tuple[pd.DataFrame, str, list[str], str]:
    """Read one core or extension file of an archive; columns named by term."""
    parts, encs, notes, members = [], [], [], []
    for loc in spec.locations:
        member = _member(zf, names, base, loc, label)
        members.append(member)
        name = f"{label}:{member}"
        data, _ = _decompress(_read_member(zf, member, label), name)
        text, enc, nts = decode(data, name, declared=spec.encoding)
        encs.append(enc)
        notes += [f"{posixpath.basename(member)}: {n}" for n in nts]
        quoting = csv.QUOTE_NONE if not spec.quote else csv.QUOTE_MINIMAL
        df = _parse(text, name, sep=spec.sep or ",", quoting=quoting, quotechar=spec.quote or '"',
                    skip=spec.skip, header=False)
        parts.append(df)
    if not parts:
        raise InputFileError(f"{label}: meta.xml gives no <location> for the {spec.row_type or 'core'} "
                             "file; re-export the archive")
    raw = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
    out = pd.DataFrame(index=raw.index)
    ncol = raw.shape[1] - 1
    used: set[str] = set()
    for idx, term, default in spec.fields:
        col = term_name(term) or f"column_{idx}"
        if col in used:
            col = f"{col}_{idx}"
        used.add(col)
        if idx is not None and idx < ncol:
            values = raw[idx].astype(str)
            if default is not None:
                values = values.where(values.str.strip() != "", default)
        else:
            values = pd.Series(default or "", index=raw.index, dtype=object)
        out[col] = values.to_numpy()
    if spec.id_index is not None and spec.id_index < ncol:
        out["__id__"] = raw[spec.id_index].astype(str).str.strip().to_numpy()
    out["__line__"] = raw["__line__"].to_numpy()
    return out, " + ".join(dict.fromkeys(encs)), notes, ", ".join(members)


def _read_member(zf: zipfile.ZipFile, member: str, label: str) -> bytes:
    info = zf.getinfo(member)
    if info.file_size > _MAX_BYTES:
        raise InputFileError(f"{label}:{member}: {info.file_size / 1e9:.1f} GB uncompressed, more "
                             "than the 4 GB this reader holds in memory; filter the download first")
    try:
        return zf.read(member)
    except (zipfile.BadZipFile, zlib.error, EOFError, NotImplementedError, RuntimeError) as err:
        raise InputFileError(f"{label}: member {member!r} cannot be unpacked ({err}); download "
                             "the archive again") from err


def _join_core(occ: pd.DataFrame, core: pd.DataFrame, label: str) -> tuple[pd.DataFrame, list[str]]:
    """Give extension occurrences the fields of their core row (event or taxon), by core id.

    Events inherit empty fields from their parent event (``parentEventID``) first, so that
    sampling sub-events take the coordinates of the event they belong to.
    """
    notes: list[str] = []
    if "__id__" not in core or "__id__" not in occ:
        raise InputFileError(f"{label}: meta.xml gives no <id>/<coreid> index, so occurrences "
                             "cannot be joined to their events; fix meta.xml")
    core = core.drop_duplicates("__id__", keep="first").set_index("__id__")
    fields = [c for c in core.columns if c != "__line__"]
    if "parentEventID" in core.columns:
        for _ in range(10):  # nested events: fill from parents, a few generations deep
            parent = core["parentEventID"].astype(str).str.strip()
            has = parent.isin(core.index) & (parent != "")
            if not has.any():
                break
            changed = False
            for c in fields:
                if c in ("parentEventID", "eventID"):
                    continue
                empty = has & (core[c].astype(str).str.strip() == "")
                if empty.any():
                    vals = core.loc[parent[empty].to_numpy(), c].to_numpy()
                    fill = pd.Series(vals, index=core.index[empty])
                    fill = fill[fill.astype(str).str.strip() != ""]
                    if len(fill):
                        core.loc[fill.index, c] = fill.to_numpy()
                        changed = True
            if not changed:
                break
    key = occ["__id__"]
    found = key.isin(core.index)
    if (~found).any():
        notes.append(f"{int((~found).sum())} occurrences name a core id not in the core file")
    joined = core.reindex(key.to_numpy())
    out = occ.copy()
    for c in fields:
        vals = joined[c].fillna("").astype(str).to_numpy()
        if c not in out.columns:
            out[c] = vals
        else:
            empty = out[c].astype(str).str.strip() == ""
            out.loc[empty, c] = vals[empty.to_numpy()]
    return out, notes


def _archive(zf: zipfile.ZipFile, names: list[str], meta: str, label: str) -> RawTable:
    base = posixpath.dirname(meta)
    try:
        root = ET.fromstring(zf.read(meta))
    except ET.ParseError as err:
        raise InputFileError(f"{label}: {meta} is not valid XML ({err}); re-export the archive") from err
    cores = [el for el in root if el.tag.rsplit("}", 1)[-1] == "core"]
    if not cores:
        raise InputFileError(f"{label}: {meta} has no <core> element, so no core file is named; "
                             "re-export the archive")
    core = _spec(cores[0], f"{label}:{meta}")
    exts = [_spec(el, f"{label}:{meta}") for el in root if el.tag.rsplit("}", 1)[-1] == "extension"]
    if core.row_type == _ROW_OCCURRENCE:
        df, enc, notes, member = _read_spec(zf, names, base, core, label)
        fmt = f"Darwin Core Archive, occurrence core {member}"
        sep = core.sep
    else:
        occ_ext = [e for e in exts if e.row_type == _ROW_OCCURRENCE]
        if not occ_ext:
            kinds = ", ".join(e.row_type or "?" for e in exts) or "none"
            raise InputFileError(
                f"{label}: a Darwin Core Archive with a {core.row_type or 'unnamed'} core and no "
                f"occurrence file (extensions: {kinds}); it holds no occurrence records: "
                "download occurrences instead")
        occ, enc, notes, member = _read_spec(zf, names, base, occ_ext[0], label)
        core_df, enc_c, notes_c, core_member = _read_spec(zf, names, base, core, label)
        df, jnotes = _join_core(occ, core_df, label)
        df = df.drop(columns="__id__")
        notes = notes + notes_c + jnotes
        fmt = (f"Darwin Core Archive, {core.row_type} core {core_member} joined to occurrences "
               f"{member} by {'eventID' if core.row_type == 'event' else 'core id'}")
        enc = enc if enc == enc_c else f"{enc} (core {enc_c})"
        sep = occ_ext[0].sep
    df = df.drop(columns=[c for c in ("__id__",) if c in df.columns])
    return RawTable(df, label, fmt, enc, sep, notes)


def _zip(path: Path, label: str) -> RawTable:
    try:
        zf = zipfile.ZipFile(path)
    except zipfile.BadZipFile as err:
        raise InputFileError(f"{label}: not a readable zip file ({err}); download it again") from err
    with zf:
        names = [i.filename for i in zf.infolist() if not i.is_dir()]
        shown = [n for n in names if not n.startswith("__MACOSX/")
                 and not posixpath.basename(n).startswith(".")]
        if "[Content_Types].xml" in names and any(n.startswith("xl/") for n in names):
            raise InputFileError(f"{label}: an Excel workbook, not a record table; save the "
                                 "sheet as CSV (UTF-8) and name that file")
        metas = sorted((n for n in shown if posixpath.basename(n).lower() == "meta.xml"),
                       key=lambda n: (n.count("/"), n))
        if metas:
            return _archive(zf, shown, metas[0], label)
        tables = [n for n in shown if n.lower().endswith(_TABLE_ENDINGS)
                  and posixpath.basename(n).lower() not in _NOT_RECORDS]
        if len(tables) > 1:
            occ = [n for n in tables if "occurrence" in posixpath.basename(n).lower()]
            tables = occ if len(occ) == 1 else tables
        if len(tables) != 1:
            what = (f"{len(tables)} tables ({_clip(tables, 3, 30)})" if tables
                    else f"no .csv/.txt/.tsv table among {len(shown)} files ({_clip(shown, 2, 30)})")
            raise InputFileError(
                f"{label}: a zip without a recognisable core: no meta.xml and {what}; unzip it "
                "and name the record file")
        member = tables[0]
        return _text_table(_read_member(zf, member, label), f"{label}:{member}",
                           f"zip with one table {member}")


def load_table(path: str | Path) -> RawTable:
    """Read a delivered record file as strings, whatever the format it came in.

    Zip files are Darwin Core Archives (with ``meta.xml``) or hold one table; gzip, bzip2 and xz
    files are decompressed before the delimiter is sniffed; anything else is delimited text.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    RawTable

    Raises
    ------
    InputFileError
        The file is missing, a folder, or unreadable in its format.
    """
    path = Path(path)
    label = str(path)
    if not path.exists():
        raise InputFileError(f"{path}: occurrence file not found; check the path")
    if path.is_dir():
        raise InputFileError(f"{path}: is a folder, expected a record file (CSV, tab-separated "
                             "text, .gz or .zip)")
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
        if head.startswith(b"PK\x03\x04") or head.startswith(b"PK\x05\x06"):
            return _zip(path, label)
        if path.stat().st_size > _MAX_BYTES:
            raise InputFileError(f"{path}: larger than the 4 GB this reader holds in memory; "
                                 "filter the records first")
        data = path.read_bytes()
    except OSError as err:
        raise InputFileError(f"{path}: cannot be read ({err.strerror}); check permissions") from err
    return _text_table(data, label, "delimited text")
