"""Decoding input text files as spreadsheets and editors save them.

Accepted: UTF-8 with or without a byte-order mark (spreadsheets and some editors write one),
and UTF-16 with its byte-order mark ("Unicode text" exports). Refused with one line: binary
files and text in another encoding. Quoted CSV cells (``"x_m","y_m"``) are split with
:func:`csv_cells`, which the CSV readers share.
"""

from __future__ import annotations

import codecs
import csv

from lapbalance.errors import InputError


def decode_text(data: bytes, source, what: str, how: str) -> str:
    """Text of an input file, or :class:`InputError` naming ``source``.

    Parameters
    ----------
    data : bytes
        File contents.
    source : str or Path
        The file, for the message.
    what : str
        What the file should be, e.g. ``"a TOML car file"``.
    how : str
        How to save it properly, e.g. ``"save the car file as UTF-8 TOML"``.
    """
    for bom, enc in ((codecs.BOM_UTF16_LE, "utf-16"), (codecs.BOM_UTF16_BE, "utf-16")):
        if data.startswith(bom) and not data.startswith(codecs.BOM_UTF32_LE):
            try:
                return data.decode(enc).lstrip("\ufeff")
            except UnicodeDecodeError:
                raise InputError(f"is not valid UTF-16 text; {how}", source) from None
    if b"\x00" in data[:65536]:
        if looks_like_utf16(data):
            raise InputError(f"is UTF-16 text without a byte-order mark; {how}", source)
        raise InputError(f"is a binary file, not {what}", source)
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(f"is not UTF-8 text; {how}", source) from None


def looks_like_utf16(data: bytes) -> bool:
    """True for mostly-ASCII UTF-16 text without a byte-order mark (zero bytes in every
    second place)."""
    head = data[:4096]
    if len(head) < 8:
        return False
    even, odd = head[0::2], head[1::2]
    for zeros, text in ((odd, even), (even, odd)):
        if zeros.count(0) > 0.9 * len(zeros) and text.count(0) < 0.05 * len(text):
            return True
    return False


def csv_cells(line: str) -> list[str]:
    """Cells of one CSV line: quotes removed as a spreadsheet writes them, spaces stripped."""
    try:
        row = next(csv.reader([line], skipinitialspace=True))
    except (csv.Error, StopIteration):
        row = line.split(",")
    return [c.strip() for c in row]
