"""Feed files (logger CSV) read into canonical long rows, streaming, with every bad row reported.

A feed reader turns one file, written as its ``[[feed]]`` says (docs/formats.md section 2), into
chunks of canonical rows::

    instrument_id  time_utc (datetime64[s], UTC)  raw_value  temperature_c  barometric_kpa  line

plus a list of ``RowProblem`` (file line, raw text, reason) for everything that could not be
read. Nothing is dropped silently: a cell is either a reading, a missing-value marker (counted),
or a problem.

How a block of the file is read: the bytes are cut into lines and the fields of each line are
counted with numpy (delimiters outside double quotes); lines with the wrong number of fields,
unbalanced quotes, stray carriage returns or NUL bytes are reported and skipped, and pandas
parses the rest as text. Numbers and times are then converted column-wise. The same reading
path serves a 1 kB file and a 1 GB file; memory is bounded by the block size.

Local logger times are converted to UTC with the IANA zone of the feed. A local time that does
not exist (clock forward) is rejected. A local time that occurs twice (clock back) is resolved
from row order when the file shows exactly one step back within the repeated hour (rows before
the step are the first occurrence, summer time; rows from the step on are the second); otherwise
it is rejected with the reason.
"""

from __future__ import annotations

import codecs
import csv
import io
import re
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from watch.config import FeedSpec
from watch.errors import FeedError

__all__ = [
    "RowProblem", "FeedChunk", "FeedReader", "READING_COLUMNS", "BLOCK_BYTES", "MAX_ROW_BYTES",
    "RAW_TEXT_CHARS", "open_feed_bytes", "bounded_lines", "clipped", "wide_encoding",
]  # fmt: skip

#: Bytes read per block; bounds memory independently of the file size.
BLOCK_BYTES = 4 << 20

#: Longest row (or header line) read [bytes, line end excluded]. A logger row is a time and a
#: few numbers per instrument, well under 1 kB even for a wide logger of a hundred channels; a
#: longer "row" is a binary or runaway file and is rejected without being held in memory.
MAX_ROW_BYTES = 64 << 10

#: Characters of a rejected row's raw text kept in the store and in reason files; the rest is
#: cut and the cut said (the row itself stays whole in the archived file).
RAW_TEXT_CHARS = 400

#: Byte-order marks of encodings whose line ends and delimiters are not single bytes: such
#: files cannot be read as the feed's byte-oriented encoding and are refused with their name.
_WIDE_BOMS = (
    (codecs.BOM_UTF32_LE, "UTF-32 (little-endian)"),
    (codecs.BOM_UTF32_BE, "UTF-32 (big-endian)"),
    (codecs.BOM_UTF16_LE, "UTF-16 (little-endian)"),
    (codecs.BOM_UTF16_BE, "UTF-16 (big-endian)"),
)  # UTF-32 LE first: its mark begins with the UTF-16 LE one

READING_COLUMNS = ("instrument_id", "time_utc", "raw_value", "temperature_c", "barometric_kpa", "line")

_NEWLINE, _CR, _QUOTE, _NUL = 10, 13, 34, 0


@dataclass(frozen=True)
class RowProblem:
    """A row (or one cell of a row) that could not be read."""

    line: int | None
    raw_text: str | None
    reason: str
    instrument_id: str | None = None


@dataclass
class FeedChunk:
    readings: pd.DataFrame  # READING_COLUMNS
    problems: list[RowProblem] = field(default_factory=list)
    missing: int = 0  # cells holding a missing-value marker
    bytes_read: int = 0


_CUT = re.compile(r"\.\.\. \[cut: \d+ characters in all\]\Z")


def clipped(text: str | None, limit: int = RAW_TEXT_CHARS) -> str | None:
    """``text`` cut to ``limit`` characters, saying how long it was (raw texts kept of
    rejected rows)."""
    if text is None or len(text) <= limit:
        return text
    cut = _CUT.search(text)
    if cut is not None and cut.start() <= limit:  # cut already
        return text
    return f"{text[:limit]}... [cut: {len(text)} characters in all]"


class _LineFeedsForCarriageReturns(io.RawIOBase):
    """A binary file whose lone carriage returns read as line feeds (files from loggers that
    end lines with CR only). Byte for byte, so positions and line numbers are the file's."""

    def __init__(self, raw):
        self._raw = raw

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def seek(self, offset: int, whence: int = io.SEEK_SET) -> int:
        return self._raw.seek(offset, whence)

    def tell(self) -> int:
        return self._raw.tell()

    def readinto(self, buffer) -> int:
        n = self._raw.readinto(buffer)
        if n:
            view = memoryview(buffer)[:n]
            view[:] = bytes(view).replace(b"\r", b"\n")
        return n

    def close(self) -> None:
        self._raw.close()
        super().close()


def wide_encoding(head: bytes) -> str | None:
    """The name of the UTF-16 or UTF-32 encoding whose byte-order mark begins ``head``, or
    None."""
    return next((name for mark, name in _WIDE_BOMS if head.startswith(mark)), None)


def open_feed_bytes(path: Path):
    """Open a feed file for reading as bytes, the way every reader of feed files must.

    Raises FeedError for a UTF-16 or UTF-32 file (recognised by its byte-order mark; such a
    file must be saved as UTF-8 or the feed's encoding). A file with carriage returns and no
    line feed in its first block (lines ended by CR only) is read with its CRs as line ends.
    """
    handle = open(path, "rb")  # noqa: SIM115 - returned to the caller, who closes it
    try:
        head = handle.read(BLOCK_BYTES)
        name = wide_encoding(head)
        if name is not None:
            mark = next(mark for mark, n in _WIDE_BOMS if n == name)
            raise FeedError(
                f"{path.name}: the file is encoded as {name} (byte-order mark "
                f"{mark.hex(' ').upper()}); slipwatch reads feeds in one-byte encodings: save "
                "it as UTF-8 (or set the feed's encoding) and deliver it again"
            )
        handle.seek(0)
        if b"\r" in head and b"\n" not in head:
            return io.BufferedReader(_LineFeedsForCarriageReturns(handle))
        return handle
    except BaseException:
        handle.close()
        raise


def bounded_lines(handle, limit: int = MAX_ROW_BYTES) -> Iterator[tuple[bytes, int]]:
    """(first ``limit`` bytes of the line without its line end, length in bytes without it) of
    each line of a binary file, in order; memory stays bounded whatever the length of a line."""
    while True:
        line = handle.readline(limit + 1)
        if not line:
            return
        if line.endswith(b"\n") or len(line) <= limit:
            text = line.rstrip(b"\r\n")
            yield text, len(text)
            continue
        head, length = line[:limit], len(line)
        while not line.endswith(b"\n"):  # the rest of a line over the limit, block by block
            line = handle.readline(BLOCK_BYTES)
            if not line:
                break
            length += len(line)
        yield head, length - (len(line) - len(line.rstrip(b"\r\n")))


def _empty_readings() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "instrument_id": pd.Series([], dtype=object),
            "time_utc": np.array([], dtype="datetime64[s]"),
            "raw_value": np.array([], dtype=float),
            "temperature_c": np.array([], dtype=float),
            "barometric_kpa": np.array([], dtype=float),
            "line": np.array([], dtype=np.int64),
        }
    )


class FeedReader:
    """Reads one feed file per its FeedSpec. ``header_notes`` lists columns of the file that no
    mapping uses and mapped columns the file lacks; ``chunks()`` yields FeedChunk;
    ``repeated_times_resolved`` counts the lines placed in time from the row order."""

    def __init__(self, path: Path | str, spec: FeedSpec, block_bytes: int = BLOCK_BYTES,
                 complete: bool = False):  # fmt: skip
        """``complete``: the deliverer said the file is finished (its done-marker exists), so
        a last line without a line end is read as a row; otherwise it is not trusted (a copy
        cut short) and is reported."""
        self.path = Path(path)
        self.spec = spec
        self.block_bytes = block_bytes
        self.complete = complete
        self.size = self.path.stat().st_size
        self.header_notes: list[str] = []
        self._delimiter = ord(spec.delimiter)
        self._held: list[pd.DataFrame] = []  # rows with a repeated local time, resolved at the end
        #: Lines whose local time occurs twice (clocks went back), placed in time by row order.
        self.repeated_times_resolved = 0
        self._settled_count: dict[str, int] = {}  # rows with a settled time seen, per group

    # --- header -------------------------------------------------------------------------------

    def _read_header(self, handle) -> int:
        """Skip the preamble, read the header line; return the number of lines consumed."""
        spec = self.spec
        lines = bounded_lines(handle)
        for skipped in range(spec.skip_rows):
            if next(lines, None) is None:
                raise FeedError(f"{self.path.name}: the file ends within the {spec.skip_rows} lines to skip")
        raw, length = next(lines, (b"", 0))
        if length > MAX_ROW_BYTES:
            raise FeedError(f"{self.path.name}: the header line (line {spec.skip_rows + 1}) is {length} bytes "
                            f"long, over the limit of {MAX_ROW_BYTES} bytes (not a feed file?)")  # fmt: skip
        if not raw.strip():
            raise FeedError(f"{self.path.name}: no header line at line {spec.skip_rows + 1} (empty file?)")
        encoding = "utf-8-sig" if codecs.lookup(spec.encoding).name == "utf-8" else spec.encoding
        text = raw.decode(encoding, errors="replace").rstrip("\r\n")
        names = [n.strip() for n in next(csv.reader([text], delimiter=spec.delimiter))]
        self._n_fields = len(names)
        self._bind_columns(names)
        return spec.skip_rows + 1

    def _bind_columns(self, names: list[str]) -> None:
        spec, where = self.spec, f"{self.path.name} (feed {self.spec.name!r})"

        def index(name: str, what: str, required: bool = True) -> int | None:
            if name in names:
                if names.count(name) > 1:
                    raise FeedError(f"{where}: column {name!r} ({what}) appears more than once in the header")
                return names.index(name)
            if required:
                raise FeedError(
                    f"{where}: the header has no column {name!r} ({what}); header columns: "
                    f"{', '.join(repr(n) for n in names)}"
                )
            return None

        self._time_index = index(spec.time_column, "time_column")
        self._baro_index = (
            index(spec.barometric_column, "barometric_column") if spec.barometric_column else None
        )
        if spec.layout == "wide":
            self._value_indexes = {}
            for raw, iid in spec.columns.items():
                position = index(raw, f"instrument {iid}", required=False)
                if position is None:
                    self.header_notes.append(f"mapped column {raw!r} ({iid}) is not in the file")
                else:
                    self._value_indexes[iid] = position
            if not self._value_indexes:
                raise FeedError(
                    f"{where}: none of the columns in [feed.columns] is in the header; header "
                    f"columns: {', '.join(repr(n) for n in names)}"
                )
            self._temperature_indexes = {
                iid: index(raw, f"temperature of {iid}") for raw, iid in spec.temperature_columns.items()
            }
            used = {self._time_index, self._baro_index, *self._value_indexes.values(),
                    *self._temperature_indexes.values()}  # fmt: skip
            unused = [n for i, n in enumerate(names) if i not in used and n]
            if unused:
                self.header_notes.append(f"columns not mapped (ignored): {', '.join(unused)}")
        else:
            self._instrument_index = index(spec.instrument_column, "instrument_column")
            self._value_index = index(spec.value_column, "value_column")
            self._temperature_index = (
                index(spec.temperature_column, "temperature_column") if spec.temperature_column else None
            )

    # --- blocks -------------------------------------------------------------------------------

    def chunks(self) -> Iterator[FeedChunk]:
        with open_feed_bytes(self.path) as handle:
            line = self._read_header(handle) + 1  # number of the first data line
            carry = b""
            overlong = 0  # bytes of a line over MAX_ROW_BYTES seen so far (its head is in carry)
            position = handle.tell()
            while True:
                data = handle.read(self.block_bytes)
                if not data:
                    break
                if overlong:
                    cut = data.find(b"\n")
                    if cut < 0:
                        overlong += len(data)
                        continue
                    problem = self._overlong(line, carry, overlong + cut)
                    line, carry, overlong, data = line + 1, b"", 0, data[cut + 1 :]
                    chunk = FeedChunk(_empty_readings(), [problem])
                    chunk.bytes_read, position = handle.tell() - position, handle.tell()
                    yield chunk
                buffer = carry + data
                cut = buffer.rfind(b"\n")
                block, carry = (buffer[: cut + 1], buffer[cut + 1 :]) if cut >= 0 else (b"", buffer)
                if len(carry) > MAX_ROW_BYTES:  # the start of a line too long to hold: skip the rest
                    overlong, carry = len(carry), carry[:MAX_ROW_BYTES]
                if not block:
                    continue
                chunk = self._parse_block(block, line)
                chunk.bytes_read = handle.tell() - position
                position = handle.tell()
                line += block.count(b"\n")
                yield chunk
            tail = FeedChunk(_empty_readings(), bytes_read=handle.tell() - position)
            if overlong:
                tail.problems.append(self._overlong(line, carry, overlong))
            elif carry.strip(b" \t\r") and self.complete:
                tail = self._parse_block(carry + b"\n", line)
                tail.bytes_read = handle.tell() - position
            elif carry.strip(b" \t\r"):
                # A last line without a line end is what a copy cut short looks like; its last
                # number may be truncated ("12.5" -> "12"), so it is not trusted.
                tail.problems.append(
                    RowProblem(line, self._decode(carry), "last line has no line end (file cut short?)")
                )
            resolved, problems = self._resolve_held()
            tail.readings = pd.concat([tail.readings, resolved], ignore_index=True) if len(tail.readings) else resolved
            tail.problems.extend(problems)
            yield tail

    def _overlong(self, line: int, head: bytes, length: int) -> RowProblem:
        return RowProblem(line, self._decode(head),
                          f"row is {length} bytes long, over the limit of {MAX_ROW_BYTES} bytes")  # fmt: skip

    def _decode(self, raw: bytes) -> str:
        return clipped(raw.decode(self.spec.encoding, errors="replace").rstrip("\r\n"))

    def _parse_block(self, block: bytes, first_line: int) -> FeedChunk:
        a = np.frombuffer(block, dtype=np.uint8)
        ends = np.flatnonzero(a == _NEWLINE)
        starts = np.concatenate(([0], ends[:-1] + 1))
        lengths = ends - starts
        has_cr = (lengths > 0) & (a[np.maximum(ends - 1, 0)] == _CR)
        blank = (lengths - has_cr) == 0

        def per_line(positions: np.ndarray) -> np.ndarray:
            return np.bincount(np.searchsorted(ends, positions), minlength=len(ends))

        delimiters = np.flatnonzero(a == self._delimiter)
        quotes = np.flatnonzero(a == _QUOTE)
        odd_quotes = np.zeros(len(ends), dtype=bool)
        if quotes.size:
            odd_quotes = per_line(quotes) % 2 == 1
            # A delimiter lies inside a quoted field when an odd number of quotes precede it on
            # its line (a doubled "" inside a field adds two and keeps the parity).
            line_of = np.searchsorted(ends, delimiters)
            before = np.searchsorted(quotes, delimiters) - np.searchsorted(quotes, starts[line_of])
            delimiters = delimiters[before % 2 == 0]
        fields = per_line(delimiters) + 1
        stray_cr = per_line(np.flatnonzero(a == _CR)) > has_cr
        nul = per_line(np.flatnonzero(a == _NUL)) > 0
        overlong = (lengths - has_cr) > MAX_ROW_BYTES
        bad = ~blank & ((fields != self._n_fields) | odd_quotes | stray_cr | nul | overlong)
        good = ~blank & ~bad

        problems = []
        for i in np.flatnonzero(bad):
            if overlong[i]:
                problems.append(self._overlong(first_line + int(i), block[starts[i] : starts[i] + MAX_ROW_BYTES],
                                               int(lengths[i] - has_cr[i])))  # fmt: skip
                continue
            if nul[i]:
                reason = "line holds NUL bytes (binary data)"
            elif stray_cr[i]:
                reason = "line holds a carriage return inside it"
            elif odd_quotes[i]:
                reason = "unbalanced double quote"
            else:
                reason = f"expected {self._n_fields} fields as in the header, found {fields[i]}"
            problems.append(RowProblem(first_line + int(i), self._decode(block[starts[i] : ends[i]]), reason))

        good_index = np.flatnonzero(good)
        frame = self._read_text(block, good_index, ~good)
        lines = first_line + good_index
        texts = _LineTexts(self, block, starts, ends, good_index)
        if self.spec.layout == "wide":
            chunk = self._wide(frame, lines, texts)
        else:
            chunk = self._long(frame, lines, texts)
        chunk.problems[:0] = problems
        return chunk

    def _read_text(self, block: bytes, good_index: np.ndarray, skip: np.ndarray) -> pd.DataFrame:
        """The good lines of a block as text columns (NaN for missing-value markers)."""
        spec = self.spec
        wanted = self._wanted_columns()
        if good_index.size == 0:
            return pd.DataFrame({i: pd.Series([], dtype=object) for i in wanted})
        kwargs = dict(
            sep=spec.delimiter, header=None, names=list(range(self._n_fields)), usecols=wanted,
            dtype=str, keep_default_na=False, na_values=list(spec.missing), skip_blank_lines=False,
            quotechar='"', encoding=spec.encoding, encoding_errors="replace", engine="c",
        )  # fmt: skip
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                frame = pd.read_csv(io.BytesIO(block), skiprows=np.flatnonzero(skip).tolist(), **kwargs)
            if len(frame) == good_index.size:
                return frame
        except (pd.errors.ParserError, ValueError):
            pass
        # Rare: pandas split a line differently from the field count (a quote inside a field).
        # Parse line by line with the csv module, which follows the same quoting rules.
        rows = []
        ends = np.flatnonzero(np.frombuffer(block, dtype=np.uint8) == _NEWLINE)
        starts = np.concatenate(([0], ends[:-1] + 1))
        missing = set(spec.missing)
        for i in good_index:
            text = self._decode(block[starts[i] : ends[i]])
            values = next(csv.reader([text], delimiter=spec.delimiter), [])
            values = (values + [""] * self._n_fields)[: self._n_fields]
            rows.append([None if values[j] in missing else values[j] for j in wanted])
        return pd.DataFrame(rows, columns=wanted, dtype=object)

    def _wanted_columns(self) -> list[int]:
        if self.spec.layout == "wide":
            columns = [self._time_index, *self._value_indexes.values(), *self._temperature_indexes.values()]
        else:
            columns = [self._time_index, self._instrument_index, self._value_index, self._temperature_index]
        columns.append(self._baro_index)
        return sorted({c for c in columns if c is not None})

    # --- layouts ------------------------------------------------------------------------------

    def _numbers(self, text: pd.Series) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(values, missing, bad) of a text column: bad = present but not a finite number."""
        missing = text.isna().to_numpy()
        if self.spec.decimal == ",":
            text = text.str.replace(",", ".", regex=False)
        values = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan, copy=True)
        bad = ~missing & ~np.isfinite(values)
        values[bad] = np.nan
        return values, missing, bad

    def _wide(self, frame: pd.DataFrame, lines: np.ndarray, texts: _LineTexts) -> FeedChunk:
        chunk = FeedChunk(_empty_readings())
        times, time_ok, time_problems = self._times(frame[self._time_index], lines, texts)
        chunk.problems.extend(time_problems)
        baro = self._numbers(frame[self._baro_index]) if self._baro_index is not None else None
        parts = []
        for iid, column in self._value_indexes.items():
            values, missing, bad = self._numbers(frame[column])
            ok = time_ok & ~missing & ~bad
            chunk.missing += int((time_ok & missing).sum())
            for i in np.flatnonzero(time_ok & bad):
                chunk.problems.append(
                    RowProblem(int(lines[i]), texts[i],
                               f"value {frame[column].iloc[i]!r} in column {self._raw_name(iid)!r} "
                               "is not a number", iid)  # fmt: skip
                )
            temperature = np.full(len(frame), np.nan)
            if iid in self._temperature_indexes:
                temperature, _, tbad = self._numbers(frame[self._temperature_indexes[iid]])
                for i in np.flatnonzero(ok & tbad):
                    chunk.problems.append(
                        RowProblem(int(lines[i]), texts[i],
                                   f"temperature {frame[self._temperature_indexes[iid]].iloc[i]!r} "
                                   f"of {iid} is not a number", iid)  # fmt: skip
                    )
                ok &= ~tbad
            barometric = np.full(len(frame), np.nan)
            if baro is not None:
                barometric = baro[0]
                for i in np.flatnonzero(ok & baro[2]):
                    chunk.problems.append(
                        RowProblem(int(lines[i]), texts[i],
                                   f"barometric pressure {frame[self._baro_index].iloc[i]!r} is not a number",
                                   iid)  # fmt: skip
                    )
                ok &= ~baro[2]
            parts.append((iid, ok, values, temperature, barometric))
        self._collect(chunk, parts, times, lines, texts, key=None)
        return chunk

    def _long(self, frame: pd.DataFrame, lines: np.ndarray, texts: _LineTexts) -> FeedChunk:
        chunk = FeedChunk(_empty_readings())
        times, time_ok, time_problems = self._times(frame[self._time_index], lines, texts)
        chunk.problems.extend(time_problems)
        ids = frame[self._instrument_index].str.strip()
        no_id = ids.isna().to_numpy() | (ids == "").fillna(False).to_numpy(dtype=bool)
        values, missing, bad = self._numbers(frame[self._value_index])
        for i in np.flatnonzero(time_ok & no_id):
            chunk.problems.append(RowProblem(int(lines[i]), texts[i], "no instrument id"))
        ok = time_ok & ~no_id
        chunk.missing += int((ok & missing).sum())
        for i in np.flatnonzero(ok & bad):
            chunk.problems.append(
                RowProblem(int(lines[i]), texts[i],
                           f"value {frame[self._value_index].iloc[i]!r} is not a number", ids.iloc[i])  # fmt: skip
            )
        ok &= ~missing & ~bad
        extras = []
        for column, what in ((self._temperature_index, "temperature"), (self._baro_index, "barometric pressure")):
            if column is None:
                extras.append(np.full(len(frame), np.nan))
                continue
            extra, _, extra_bad = self._numbers(frame[column])
            for i in np.flatnonzero(ok & extra_bad):
                chunk.problems.append(
                    RowProblem(int(lines[i]), texts[i],
                               f"{what} {frame[column].iloc[i]!r} is not a number", ids.iloc[i])  # fmt: skip
                )
            ok &= ~extra_bad
            extras.append(extra)
        id_array = ids.to_numpy(dtype=object)
        self._collect(chunk, [(id_array, ok, values, extras[0], extras[1])], times, lines, texts, key=id_array)
        return chunk

    def _raw_name(self, iid: str) -> str:
        return next(raw for raw, i in self.spec.columns.items() if i == iid)

    def _collect(self, chunk: FeedChunk, parts, times, lines, texts: _LineTexts, key) -> None:
        """Stack the per-instrument parts into canonical rows; rows with a repeated local time
        are held back until the end of the file, when the row order around them is known."""
        first, second, local = times
        repeated = first != second  # NaT never compares equal, but NaT rows are not ok anyway
        group = key if key is not None else np.full(len(lines), "", dtype=object)
        settled = ~repeated & ~np.isnat(first)
        if repeated.any():
            # Rows with a repeated local time belong to the same run when no settled row of the
            # same group comes between them.
            counts = pd.Series(settled.astype(np.int64)).groupby(group).cumsum().to_numpy()
            offsets = pd.Series(group).map(lambda g: self._settled_count.get(g, 0)).to_numpy()
            run = counts + offsets
        for g, n in pd.Series(settled).groupby(group).sum().items():
            self._settled_count[g] = self._settled_count.get(g, 0) + int(n)

        frames = []
        for iid, ok, values, temperature, barometric in parts:
            take = ok & ~repeated
            frames.append(
                pd.DataFrame(
                    {
                        "instrument_id": iid[take] if isinstance(iid, np.ndarray) else iid,
                        "time_utc": first[take],
                        "raw_value": values[take],
                        "temperature_c": temperature[take],
                        "barometric_kpa": barometric[take],
                        "line": lines[take],
                    }
                )
            )
            hold = ok & repeated
            if hold.any():
                self._held.append(
                    pd.DataFrame(
                        {
                            "instrument_id": iid[hold] if isinstance(iid, np.ndarray) else iid,
                            "group": group[hold],
                            "run": run[hold],
                            "local": local[hold],
                            "first": first[hold],
                            "second": second[hold],
                            "raw_value": values[hold],
                            "temperature_c": temperature[hold],
                            "barometric_kpa": barometric[hold],
                            "line": lines[hold],
                            "text": [texts[i] for i in np.flatnonzero(hold)],
                        }
                    )
                )
        resolved, problems = self._resolve_held(final=False)
        if len(resolved):
            frames.append(resolved)
        chunk.problems.extend(problems)
        if frames:
            chunk.readings = pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0]
            chunk.readings["instrument_id"] = chunk.readings["instrument_id"].astype(object)

    # --- times --------------------------------------------------------------------------------

    def _times(self, text: pd.Series, lines: np.ndarray, texts: _LineTexts):
        """((first, second, local) datetime64[s] arrays, ok mask, problems).

        ``first``/``second`` are the UTC instants of the first (summer time) and second
        occurrence of the local time; they differ only for repeated local times."""
        spec = self.spec
        codes, uniques = pd.factorize(text, use_na_sentinel=True)
        uniques = pd.Series(uniques, dtype=object).str.strip()
        aware = "%z" in spec.time_format or "%Z" in spec.time_format
        parsed = pd.to_datetime(uniques, format=spec.time_format, errors="coerce", utc=aware)
        problems = []
        if aware:
            utc = parsed.dt.tz_localize(None)
            first = second = local = utc
            gap = pd.Series(False, index=utc.index)
        elif spec.time_zone == "UTC":
            first = second = local = parsed
            gap = pd.Series(False, index=parsed.index)
        else:
            n = len(parsed)
            first = parsed.dt.tz_localize(spec.time_zone, ambiguous=np.ones(n, bool), nonexistent="NaT")
            second = parsed.dt.tz_localize(spec.time_zone, ambiguous=np.zeros(n, bool), nonexistent="NaT")
            gap = parsed.notna() & first.isna()
            first = first.dt.tz_convert("UTC").dt.tz_localize(None)
            second = second.dt.tz_convert("UTC").dt.tz_localize(None)
            local = parsed

        def expand(series: pd.Series) -> np.ndarray:
            # Straight to whole seconds: through nanoseconds, years outside 1677-2262 would wrap.
            values = series.to_numpy(dtype="datetime64[s]")
            out = values[codes]
            out[codes < 0] = np.datetime64("NaT")
            return out

        first_rows, second_rows, local_rows = expand(first), expand(second), expand(local)
        unparsed = np.isnat(expand(parsed.dt.tz_localize(None) if aware else parsed))
        gap_rows = gap.to_numpy(dtype=bool)[codes] & (codes >= 0)
        for i in np.flatnonzero(unparsed):
            value = text.iloc[i]
            if pd.isna(value):
                reason = f"no time in column {spec.time_column!r}"
            else:
                reason = f"time {value!r} does not match the format {spec.time_format!r}"
            problems.append(RowProblem(int(lines[i]), texts[i], reason))
        for i in np.flatnonzero(gap_rows):
            problems.append(
                RowProblem(int(lines[i]), texts[i],
                           f"local time {text.iloc[i].strip()!r} does not exist in {spec.time_zone} "
                           "(the clocks went forward over it)")  # fmt: skip
            )
        ok = ~unparsed & ~gap_rows
        return (first_rows, second_rows, local_rows), ok, problems

    def _resolve_held(self, final: bool = True) -> tuple[pd.DataFrame, list[RowProblem]]:
        """Settle the rows whose local time occurred twice, from the row order in each run.

        A run is settled once a row with an unrepeated time of the same group follows it (or at
        the end of the file, ``final``); until then its rows wait in ``self._held``."""
        if not self._held:
            return _empty_readings(), []
        held = pd.concat(self._held, ignore_index=True).sort_values("line", kind="stable")
        if final:
            closed = np.ones(len(held), dtype=bool)
        else:
            seen = held["group"].map(lambda g: self._settled_count.get(g, 0)).to_numpy()
            closed = held["run"].to_numpy() < seen
        self._held = [held[~closed]] if not closed.all() else []
        settled, problems = [], []
        zone = self.spec.time_zone
        for _, run in held[closed].groupby(["group", "run"], sort=False):
            # One time row per line: in the wide layout a line carries several instruments.
            per_line = run.drop_duplicates("line")
            local = per_line["local"].to_numpy()
            steps = np.flatnonzero(local[1:] <= local[:-1]) + 1
            if len(steps) == 1:
                second_from = per_line["line"].to_numpy()[steps[0]]
                use_second = run["line"].to_numpy() >= second_from
                times = np.where(use_second, run["second"].to_numpy(), run["first"].to_numpy())
                settled.append(run.assign(time_utc=times))
                self.repeated_times_resolved += len(per_line)
                continue
            why = (
                "the row order does not show which occurrence it is"
                if len(steps) == 0
                else "the rows of the repeated hour are out of order"
            )
            for line, text, iid, local_time in per_line[["line", "text", "instrument_id", "local"]].itertuples(index=False):
                problems.append(
                    RowProblem(int(line), text,
                               f"local time {local_time} occurs twice in {zone} (clocks went back) "
                               f"and {why}", iid if self.spec.layout == "long" else None)  # fmt: skip
                )
        readings = (
            pd.concat(settled, ignore_index=True)[list(READING_COLUMNS)] if settled else _empty_readings()
        )
        return readings, problems


class _LineTexts:
    """Raw text of the i-th good line of a block, decoded on demand (only for problems)."""

    def __init__(self, reader: FeedReader, block: bytes, starts, ends, good_index):
        self.reader, self.block, self.starts, self.ends, self.good = reader, block, starts, ends, good_index

    def __getitem__(self, i: int) -> str:
        k = self.good[i]
        return self.reader._decode(self.block[self.starts[k] : self.ends[k]])
