"""Check the structure of a FITS file before astropy reads it.

The mandatory keywords of every header (FITS Standard 4.0, section 4.4.1: SIMPLE/XTENSION,
BITPIX, NAXIS, NAXISn, PCOUNT, GCOUNT, TFIELDS, TFORMn) and the scaling keywords BSCALE/BZERO are
parsed from the raw 80-character cards, and the data sizes they promise are compared with the
bytes present.  A damaged keyword is refused with its name, its value and what was expected; a
file that ends early is refused when the spectrum's own HDU is incomplete, else recorded (the
uncertainty or mask extension it loses is named).  Nothing is allocated from a header's promise.
"""

import gzip
import io
import math
import os
import re

__all__ = ["check_structure", "record_warnings", "Structure"]

_BLOCK = 2880
_CARD = 80
_BITPIX = (8, 16, 32, 64, -32, -64)
#: Bytes per element of the binary-table TFORM letters (FITS Standard 4.0, table 18).
_TFORM_BYTES = {"L": 1, "B": 1, "I": 2, "J": 4, "K": 8, "A": 1, "E": 4, "D": 8, "C": 8, "M": 16,
                "P": 8, "Q": 16}
_TFORM = re.compile(r"^\s*(\d*)\s*([LXBIJKAEDCMPQ])", re.IGNORECASE)
_INT = re.compile(r"^[+-]?\d+$")
#: A gzip file is decompressed at most to this size before it is refused.
MAX_DECOMPRESSED = 4 * 1024 ** 3


class Structure:
    """What the raw headers say: one ``(index, kind, extname, complete)`` per HDU found, and
    where the file ends early (``truncated``: index of the first incomplete HDU, or None)."""

    def __init__(self):
        self.hdus = []
        self.truncated = None
        self.truncated_text = ""
        self.nextend = None
        self.cut_after = None  # (index, label) of an HDU whose 2880-byte padding is cut short

    def label(self, index):
        for i, _, name, _ in self.hdus:
            if i == index:
                return f"{i} ({name})" if name else f"{i}"
        return f"{index}"


def _value(card):
    """The value field of a card as text (strings unquoted), or None for a card without value."""
    if card[8:10] != "= ":
        return None
    field = card[10:].strip()
    if field.startswith("'"):
        out, i = [], 1
        while i < len(field):
            if field[i] == "'":
                if i + 1 < len(field) and field[i + 1] == "'":
                    out.append("'")
                    i += 2
                    continue
                break
            out.append(field[i])
            i += 1
        return "'" + "".join(out).rstrip() + "'"
    return field.split("/", 1)[0].strip()


def _as_int(cards, key, ctx, label, low=0, high=None, default=None):
    if key not in cards:
        if default is not None:
            return default
        ctx.fail(f"HDU {label}: mandatory keyword {key} is missing; expected a whole number "
                 f"(FITS Standard 4.4.1); the file is damaged or not FITS")
    text = cards[key]
    if text is None or not _INT.match(text):
        ctx.fail(f"HDU {label}: keyword {key} = {text} is not a whole number; expected an integer"
                 f"{f' from {low}' if low is not None else ''}"
                 f"{f' to {high}' if high is not None else ''}; fix the header card")
    value = int(text)
    if (low is not None and value < low) or (high is not None and value > high):
        ctx.fail(f"HDU {label}: keyword {key} = {value} is out of range; expected {low} to "
                 f"{high if high is not None else 'any size'}")
    return value


def _check_number(cards, key, ctx, label):
    if key not in cards:
        return
    text = cards[key]
    try:
        value = float(str(text).replace("D", "E").replace("d", "e"))
    except (TypeError, ValueError):
        value = float("nan")
    if text is None or str(text).startswith("'") or not math.isfinite(value):
        ctx.fail(f"HDU {label}: keyword {key} = {text} is not a finite number; expected a number "
                 f"(e.g. {key} = 1.0); fix the header card")


def _read_header(stream):
    """Cards of one header as {key: value text} (first occurrence), the first key, the number of
    bytes read and whether the END card was found."""
    cards, first, nbytes = {}, None, 0
    while True:
        block = stream.read(_BLOCK)
        nbytes += len(block)
        if len(block) < _BLOCK:  # the file ends inside this header
            if first is None and len(block) >= 8:
                first = block[:8].decode("ascii", errors="replace").strip().upper()
            return cards, first, nbytes, False
        for j in range(0, _BLOCK, _CARD):
            card = block[j:j + _CARD].decode("ascii", errors="replace")
            key = card[:8].strip().upper()
            if first is None:
                first = key
            if key == "END":
                return cards, first, nbytes, True
            if key and key not in cards and key not in ("COMMENT", "HISTORY"):
                cards[key] = _value(card)


def _table_checks(cards, ctx, label, naxis1, binary):
    tfields = _as_int(cards, "TFIELDS", ctx, label, 0, 999)
    width = 0
    for n in range(1, tfields + 1):
        key = f"TFORM{n}"
        if key not in cards or cards[key] is None:
            ctx.fail(f"HDU {label}: TFIELDS = {tfields} but {key} is missing; expected one TFORMn "
                     f"per column (the table has fewer columns than TFIELDS says)")
        for scale in (f"TSCAL{n}", f"TZERO{n}"):
            _check_number(cards, scale, ctx, label)
        if not binary:
            if f"TBCOL{n}" not in cards:
                ctx.fail(f"HDU {label}: TFIELDS = {tfields} but TBCOL{n} is missing")
            continue
        form = str(cards[key]).strip("'")
        m = _TFORM.match(form)
        if m is None:
            ctx.fail(f"HDU {label}: keyword {key} = '{form}' is not a binary-table format; "
                     f"expected e.g. 'E', '1D', '3908E', '10A'")
        repeat = int(m.group(1)) if m.group(1) else 1
        code = m.group(2).upper()
        width += (repeat + 7) // 8 if code == "X" else repeat * _TFORM_BYTES[code]
    if binary and width != naxis1:
        ctx.fail(f"HDU {label}: the columns' TFORMn add up to {width} bytes per row but NAXIS1 = "
                 f"{naxis1}; expected them to agree (TFIELDS or a TFORMn is wrong)")


def _walk(stream, size, ctx):
    st = Structure()
    pos, index = 0, 0
    while pos < size:
        cards, first, nbytes, complete = _read_header(stream)
        name = str(cards.get("EXTNAME") or "").strip("'").strip() or None
        label = f"{index} ({name})" if name else f"{index}"
        if not complete:
            if index == 0:
                ctx.fail("the primary header has no END card (the file is truncated or not "
                         "FITS); expected a FITS file starting with SIMPLE = T")
            if first != "XTENSION":
                break  # padding or junk after the last HDU: astropy ignores it too
            st.truncated = index
            st.truncated_text = f"the file ends inside the header of HDU {label}"
            st.hdus.append((index, first, name, False))
            break
        if index == 0 and first != "SIMPLE":
            ctx.fail(f"the first card is {first!r}, not SIMPLE; expected a FITS file")
        if index > 0 and first != "XTENSION":
            break  # trailing bytes that are not an extension: astropy ignores them too
        bitpix = cards.get("BITPIX")
        if bitpix is None or not _INT.match(bitpix) or int(bitpix) not in _BITPIX:
            ctx.fail(f"HDU {label}: keyword BITPIX = {bitpix} is not one of {list(_BITPIX)}")
        naxis = _as_int(cards, "NAXIS", ctx, label, 0, 999)
        dims = [_as_int(cards, f"NAXIS{n}", ctx, label, 0) for n in range(1, naxis + 1)]
        xtension = str(cards.get("XTENSION") or "").strip("'").strip().upper()
        pcount = _as_int(cards, "PCOUNT", ctx, label, 0, default=0 if index == 0 else None)
        gcount = _as_int(cards, "GCOUNT", ctx, label, 0, default=1 if index == 0 else None)
        for key in ("BSCALE", "BZERO"):
            _check_number(cards, key, ctx, label)
        if xtension in ("BINTABLE", "TABLE") and naxis == 2:
            _table_checks(cards, ctx, label, dims[0], xtension == "BINTABLE")
        if index == 0 and "NEXTEND" in cards and cards["NEXTEND"] and _INT.match(cards["NEXTEND"]):
            st.nextend = int(cards["NEXTEND"])
        elements = math.prod(dims) if naxis else 0
        nbytes_data = abs(int(bitpix)) // 8 * gcount * (pcount + elements) if naxis else 0
        padded = -(-nbytes_data // _BLOCK) * _BLOCK
        pos += nbytes
        st.hdus.append((index, xtension or "PRIMARY", name, True))
        if pos + nbytes_data > size:
            st.hdus[-1] = (index, xtension or "PRIMARY", name, False)
            st.truncated = index
            st.truncated_text = (f"the file ends inside the data of HDU {label} ({size - pos} of "
                                 f"{nbytes_data} bytes present)")
            break
        if pos + padded > size:  # data complete, its padding cut: the file was cut here
            st.cut_after = (index, label)
        pos += padded
        stream.seek(min(pos, size))
        index += 1
    return st


def check_structure(target, ctx):
    """Walk the raw headers of ``target`` (a path or a binary file object); return
    ``(Structure, target)`` where a gzip file is replaced by its decompressed bytes."""
    if isinstance(target, (str, os.PathLike)):
        with open(target, "rb") as fh:
            raw = fh.read()
    elif hasattr(target, "read") and hasattr(target, "seek"):
        start = target.tell()
        raw = target.read()
        target.seek(start)
    else:  # a stream we cannot rewind: astropy alone reads it
        return Structure(), target
    if raw[:2] == b"\x1f\x8b":
        try:
            with gzip.GzipFile(fileobj=io.BytesIO(raw)) as gz:
                raw = gz.read(MAX_DECOMPRESSED + 1)
        except (OSError, EOFError):
            ctx.fail("is a gzip file that ends early or is damaged (truncated .gz); expected a "
                     "complete gzip-compressed FITS file")
        if len(raw) > MAX_DECOMPRESSED:
            ctx.fail(f"decompresses to more than {MAX_DECOMPRESSED // 1024 ** 3} GiB; expected a "
                     f"1D spectrum")
    if len(raw) < _BLOCK or not raw.startswith(b"SIMPLE  ="):
        ctx.fail("is not a FITS file: it does not start with a full 2880-byte header beginning "
                 "SIMPLE = T; expected a FITS file (.fits or .fits.gz); check that it is complete")
    return _walk(io.BytesIO(raw), len(raw), ctx), io.BytesIO(raw)


def record_warnings(spec, caught):
    """Keep the warnings astropy gave while reading (one line each) in ``meta["zline"]``."""
    messages = sorted({str(w.message).splitlines()[0] for w in caught})
    if messages:
        spec.meta["zline"]["warnings"] = messages
