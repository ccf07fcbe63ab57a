"""Audio files through soundfile/libsndfile: WAV (PCM, float, µ-law, A-law,
WAVEX, RF64), FLAC, AIFF, OGG and the rest libsndfile reads.

Samples are float64 in full-scale units (1.0 = digital full scale). Physical
units: ``value = full_scale * sample + offset`` per channel.

Integer PCM is quantized here, not by libsndfile, so that a write/read round
trip is within half an LSB: libsndfile scales float to 16 bit by 0x7FFF on
writing but divides by 0x8000 on reading (observed with libsndfile 1.2), which
would cost up to one LSB near full scale. Codes are ``round(x * 2**(b-1))``
limited to ``[-2**(b-1), 2**(b-1) - 1]``; reading divides by ``2**(b-1)``
(the usual two's-complement fractional convention, which is also what
libsndfile's reader does). A value in ``(1 - 2**-b, 1]`` therefore saturates to
the largest code, one LSB short of +1.0: that is not counted as clipping.
"""

from __future__ import annotations

import json
import math
import os
import re
import tempfile
from typing import Any, Iterator

import numpy as np
import soundfile as sf

from simwave import __version__
from simwave.epoch import fixed_epoch
from simwave.errors import WaveformError
from simwave.signals.common import WriteResult, dbfs, dumps, per_channel
from simwave.signals.stream import Rows, sample_places

#: Bits of the PCM subtypes quantized here.
PCM_BITS = {"PCM_S8": 8, "PCM_U8": 8, "PCM_16": 16, "PCM_24": 24, "PCM_32": 32}
#: Peak level, in dBFS, that on_clip='normalize' scales a too-loud record to.
NORMALIZE_LEVEL_DBFS = -1.0
#: Subtypes that hold values beyond full scale unharmed.
FLOAT_SUBTYPES = {"FLOAT", "DOUBLE"}
#: libsndfile's command to write (SF_TRUE) or leave out (SF_FALSE) the PEAK chunk of float
#: files (sndfile.h; soundfile does not export it)
SFC_SET_ADD_PEAK_CHUNK = 0x1050
#: Largest magnitude a FLOAT (IEEE 754 binary32) sample holds; beyond it the value is stored
#: as infinite (IEEE Std 754-2019, binary32 format: (2 - 2**-23) * 2**127).
FLOAT32_MAX = float(np.finfo(np.float32).max)
#: libsndfile keeps string chunks up to about 2 kB (observed); stay below.
_META_LIMIT = 2000
_META_KEY = "simwave"
READ_CHUNK = 1 << 16


def _open_error(path: str, exc: Exception) -> WaveformError:
    msg = str(exc)
    msg = re.sub(r"^Error opening '.*?': ", "", msg)
    return WaveformError(f"{path}: not a readable audio file ({msg.strip().rstrip('.')})")


def _truncation(info_text: str) -> str | None:
    # libsndfile's header log says "data : 4000 (should be 2999)" when the data chunk
    # declares more bytes than the file holds.
    m = re.search(r"^data\s*:\s*(\d+)\s*\(should be (\d+)\)", info_text, re.M)
    if m and int(m.group(2)) < int(m.group(1)):
        return f"truncated: data chunk declares {m.group(1)} bytes, file holds {m.group(2)}"
    return None


#: WAVE_FORMAT_EXTENSIBLE speaker-position bits, lowest first (Microsoft,
#: "WAVEFORMATEXTENSIBLE", dwChannelMask; quoted from memory).
_SPEAKERS = ("left", "right", "center", "lfe", "back-left", "back-right", "front-left-of-center",
             "front-right-of-center", "back-center", "side-left", "side-right")
#: Formats whose specification fixes the order of two channels as left, right (RIFF WAVE,
#: Microsoft/IBM 1991; FLAC format specification, channel assignment; AIFF 1.3, Apple
#: 1989; from memory).
_STEREO_LR = ("WAV", "WAVEX", "RF64", "W64", "FLAC", "AIFF")


def speaker_names(path: str, audio_format: str, n_channels: int) -> list[str] | None:
    """Channel names where the file says which speaker each channel feeds: the channel mask
    of a WAVE_FORMAT_EXTENSIBLE header, or two channels of a format whose specification
    orders stereo as left, right. None otherwise."""
    if audio_format in ("WAV", "WAVEX", "RF64"):
        mask = _wav_channel_mask(path)
        if mask:
            names = [name for bit, name in enumerate(_SPEAKERS) if mask >> bit & 1]
            if len(names) == n_channels:
                return names
    if n_channels == 2 and audio_format in _STEREO_LR:
        return ["left", "right"]
    return None


def _wav_channel_mask(path: str) -> int | None:
    """dwChannelMask of an extensible 'fmt ' chunk (format tag 0xFFFE), else None."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(4096)
    except OSError:
        return None
    at = head.find(b"fmt ", 12)
    if at < 0 or len(head) < at + 8 + 24:
        return None
    size = int.from_bytes(head[at + 4:at + 8], "little")
    body = head[at + 8:at + 8 + size]
    if size < 24 or int.from_bytes(body[0:2], "little") != 0xFFFE:
        return None
    return int.from_bytes(body[20:24], "little")


class AudioSource:
    """Streaming reader of one audio file (see module docs for scaling)."""

    family = "audio"

    def __init__(self, path: str, *, full_scale: Any = None, offset: Any = None,
                 units: str | None = None, rate: float | None = None) -> None:
        self.path = path
        #: frames per read; a reader that wants the file in one block may raise it
        self.read_chunk = READ_CHUNK
        try:
            self.f = sf.SoundFile(path)
        except (sf.LibsndfileError, RuntimeError, TypeError) as exc:
            raise _open_error(path, exc) from None
        problem = _truncation(self.f.extra_info)
        if problem:
            self.f.close()
            raise WaveformError(f"{path}: {problem}")
        self.format = self.f.format
        self.subtype = self.f.subtype
        self.file_rate = float(self.f.samplerate)
        self.rate = self.file_rate
        self.n_samples = int(self.f.frames)
        nch = int(self.f.channels)
        meta = self._metadata()
        default = speaker_names(path, self.format, nch) or [f"ch{i}" for i in range(nch)]
        self.channels = list(meta.get("channels") or default)
        if len(self.channels) != nch:
            self.channels = default
        self.t0 = float(meta.get("t0", 0.0))
        self.attrs: dict[str, Any] = dict(meta.get("attrs") or {})
        meta_units = meta.get("units")
        fs_meta = meta.get("full_scale")
        off_meta = meta.get("offset")
        if full_scale is None and offset is None and fs_meta is not None:
            # written by simwave with a calibration: give back physical values
            self.scale = per_channel(fs_meta, nch, "full_scale", path)
            off = off_meta if off_meta is not None else 0.0
            self.offset = per_channel(off, nch, "offset", path)
            self.units = list(meta_units) if meta_units and len(meta_units) == nch else ["V"] * nch
        elif full_scale is not None or offset is not None:
            fs = 1.0 if full_scale is None else full_scale
            self.scale = per_channel(fs, nch, "full_scale", path)
            self.offset = per_channel(0.0 if offset is None else offset, nch, "offset", path)
            self.units = [units or "V"] * nch
        else:
            self.scale = None
            self.offset = None
            if meta_units and len(meta_units) == nch:
                self.units = list(meta_units)
            else:
                self.units = [units or "FS"] * nch
        if units:
            self.units = [units] * nch
        self.time_axis = None
        self.notes: list[str] = []
        self._started = False

    def _metadata(self) -> dict[str, Any]:
        try:
            text = self.f.comment or ""
        except (sf.LibsndfileError, RuntimeError):
            return {}
        if not text.startswith("{"):
            return {}
        try:
            meta = json.loads(text)
        except ValueError:
            return {}
        meta = meta.get(_META_KEY) if isinstance(meta, dict) else None
        return meta if isinstance(meta, dict) else {}

    def rows(self, select: list[int]) -> Iterator[Rows]:
        got = 0
        # Some codecs cannot seek (GSM 6.10, G.721, G.723, NMS ADPCM: libsndfile's "Seek
        # attempted on unseekable file type"): a second pass reopens the file instead.
        if self._started:
            self.f.close()
            try:
                self.f = sf.SoundFile(self.path)
            except (sf.LibsndfileError, RuntimeError, TypeError) as exc:
                raise _open_error(self.path, exc) from None
        self._started = True
        # a mono file's one column needs no copy (with more channels the selecting copy's
        # layout, channel-major, is what later sums per channel have always run on)
        every = self.f.channels == 1 and list(select) == [0]
        # binary32 samples read as they are stored (one read a block; doubles go through
        # libsndfile's 8 kB buffer) and widened by numpy: exact, the same values as
        # libsndfile's own widening (a plain cast)
        stored = "float32" if self.f.subtype == "FLOAT" else "float64"
        while True:
            try:
                data = self.f.read(self.read_chunk, dtype=stored, always_2d=True)
            except (sf.LibsndfileError, RuntimeError) as exc:
                raise WaveformError(
                    f"{self.path}, sample {got}: cannot decode audio ({exc})") from None
            if data.shape[0] == 0:
                break
            if data.dtype != np.float64:
                data = data.astype(np.float64)
            if self.scale is not None:
                data = data * self.scale + self.offset
            yield Rows(data if every else data[:, select], None,
                       sample_places(got, self.rate, self.t0))
            got += data.shape[0]
        if got < self.n_samples:
            raise WaveformError(
                f"{self.path}: truncated or corrupt: header promises {self.n_samples} frames, "
                f"only {got} could be read"
            )

    def close(self) -> None:
        self.f.close()


def default_subtype(audio_format: str) -> str:
    """FLOAT where the container has it (no clipping), else the best PCM it offers."""
    for candidate in ("FLOAT", "PCM_24", "PCM_16"):
        if sf.check_format(audio_format, candidate):
            return candidate
    return sf.default_subtype(audio_format)


def _abs_peak(x: np.ndarray) -> tuple[int, float]:
    """(flat index, value) of the first largest |x|, as ``argmax(abs(x))`` finds it, without
    the temporary array: the larger of max(x) and -min(x), the earlier index on a tie.
    NaN anywhere gives a NaN peak (argmax and argmin stop at the first NaN)."""
    flat_x = x.reshape(-1)
    i_hi, i_lo = int(np.argmax(flat_x)), int(np.argmin(flat_x))
    hi, lo = float(flat_x[i_hi]), -float(flat_x[i_lo])
    if math.isnan(hi) or math.isnan(lo):
        i = i_hi if math.isnan(hi) else i_lo
        return i, math.nan
    if hi > lo:
        return i_hi, hi
    if lo > hi:
        return i_lo, lo
    return min(i_hi, i_lo), hi


class _UnsyncedSoundFile(sf.SoundFile):
    """A SoundFile whose close does not ask libsndfile to sync the file to disk.

    soundfile's ``close`` calls ``flush`` (``sf_write_sync``, an fsync) and then
    ``sf_close``; libsndfile writes the final header sizes and the comment chunk in
    ``sf_close``, after that sync (seen with strace), so the sync never made the finished
    file durable. It cost 0.3 ms a file on a quiet disk and 3-7 ms while other processes
    wrote (most of a short batch pair's writing). What the writers guarantee is atomic
    replacement (:mod:`simwave.signals.atomic`): the target name appears only when the
    temporary file is complete, whether or not the data have reached the disk yet. An
    explicit :meth:`flush` still syncs; only the one inside ``close`` is skipped.
    """

    _closing = False

    def flush(self) -> None:
        if not self._closing:
            super().flush()

    def close(self) -> None:
        self._closing = True
        try:
            super().close()
        finally:
            self._closing = False


def _through_float32(x: np.ndarray) -> np.ndarray:
    """float64 samples as a FLOAT file holds them (IEEE 754 binary32, round to nearest)."""
    return np.asarray(x, dtype=np.float64).astype(np.float32).astype(np.float64)


def _unchanged(x: np.ndarray) -> np.ndarray:
    return np.asarray(x, dtype=np.float64)


class AudioSink:
    """Writes audio to an already-chosen (temporary) file name.

    Parameters
    ----------
    tmp : str
        File to write (the atomic target's temporary file).
    audio_format : str
        soundfile major format (``"WAV"``, ``"FLAC"``, ``"RF64"``, ...).
    rate : float
        Must be a whole number of hertz: audio headers store an integer rate.
    channels, units : list of str
        Stored in the file's comment string as JSON so simwave reads them back.
    subtype : str, optional
        Default FLOAT where available (values beyond full scale kept).
    on_clip : {"error", "clip", "normalize"}
        What to do when an integer-coded subtype would clip (|x| > 1). ``normalize``
        scales the whole record so that its peak is ``normalize_level_dbfs``, for
        float subtypes too when the peak exceeds full scale.
    normalize_level_dbfs : float
        Peak level that ``normalize`` scales to, in dB relative to full scale
        (default -1: 1 dB of headroom, common practice for files that will be
        converted or encoded).
    full_scale, offset : float or list, optional
        ``sample = (value - offset) / full_scale`` per channel.
    peak_hint : float, optional
        Known peak of the whole signal (lets ``normalize`` write in one pass).
    """

    def __init__(self, tmp: str, audio_format: str, rate: float, channels: list[str],
                 units: list[str], t0: float, attrs: dict[str, Any], *, subtype: str | None = None,
                 on_clip: str = "error", full_scale: Any = None, offset: Any = None,
                 peak_hint: float | None = None, target: str | None = None,
                 normalize_level_dbfs: float = NORMALIZE_LEVEL_DBFS) -> None:
        self.where = target or tmp
        if abs(rate - round(rate)) > 1e-9 * rate:
            raise WaveformError(
                f"{self.where}: audio files store a whole number of hertz; {rate!r} Hz is not "
                f"(write CSV or HDF5 instead, or resample)"
            )
        self.rate = int(round(rate))
        self.tmp = tmp
        self.format = audio_format
        self.subtype = (subtype or default_subtype(audio_format)).upper()
        if not sf.check_format(audio_format, self.subtype):
            ok = ", ".join(sf.available_subtypes(audio_format))
            raise WaveformError(
                f"{self.where}: {audio_format} cannot hold subtype {self.subtype}; "
                f"choose one of {ok}"
            )
        if on_clip not in ("error", "clip", "normalize"):
            raise WaveformError(f"on_clip must be 'error', 'clip' or 'normalize', got {on_clip!r}")
        self.on_clip = on_clip
        level = float(normalize_level_dbfs)
        if not (math.isfinite(level) and level <= 0):
            raise WaveformError(f"{self.where}: --normalize-level must be <= 0 dBFS, got "
                                f"{normalize_level_dbfs!r}")
        self.normalize_to = 10.0 ** (level / 20.0)
        self.bounded = self.subtype not in FLOAT_SUBTYPES
        # The largest sample magnitude the subtype holds: full scale for integer codes, the
        # binary32 range for FLOAT (beyond it a value would be written as infinite).
        self.limit = (1.0 if self.bounded
                      else FLOAT32_MAX if self.subtype == "FLOAT" else math.inf)
        n = len(channels)
        self.n_channels = n
        fs = 1.0 if full_scale is None else full_scale
        self.scale = per_channel(fs, n, "full_scale", self.where)
        self.offset = per_channel(0.0 if offset is None else offset, n, "offset", self.where)
        self._identity = bool(np.all(self.scale == 1.0) and np.all(self.offset == 0.0))
        self.channels, self.units, self.t0, self.attrs = channels, units, t0, attrs
        self.calibrated = full_scale is not None or offset is not None
        self.peak = 0.0
        self.peak_at: tuple[int, int] | None = None
        self.clipped = 0
        self.count = 0
        self.gain = 1.0
        self.spool = None
        self.f = None
        self.stored_names: tuple | None = None  # channels, units, t0 the comment holds
        if on_clip == "normalize":
            if peak_hint is None:
                # peak unknown until the end: keep float64 samples in a spool file beside
                # the target, scale and encode them in a second pass on close
                fd, self.spool_path = tempfile.mkstemp(
                    prefix=".spool.", suffix=".f64", dir=os.path.dirname(os.path.abspath(tmp)))
                self.spool = os.fdopen(fd, "wb")
            else:
                self.gain = self._normalizing_gain(peak_hint)
        if self.spool is None:
            self._open()

    def _meta(self) -> str:
        meta: dict[str, Any] = {
            "version": __version__, "channels": self.channels, "units": self.units, "t0": self.t0,
        }
        if self.calibrated or self.gain != 1.0:
            meta["full_scale"] = (self.scale / self.gain).tolist()
            meta["offset"] = self.offset.tolist()
        full = dumps({_META_KEY: dict(meta, attrs=self.attrs)})
        if len(full) <= _META_LIMIT:
            return full
        short = dumps({_META_KEY: meta})
        return short if len(short) <= _META_LIMIT else ""

    def _open(self) -> None:
        try:
            self.f = _UnsyncedSoundFile(self.tmp, "w", self.rate, self.n_channels,
                                        self.subtype, format=self.format)
        except (sf.LibsndfileError, RuntimeError, ValueError) as exc:
            raise WaveformError(f"{self.where}: cannot write {self.format} ({exc})") from None
        if self.subtype in FLOAT_SUBTYPES and fixed_epoch() is not None:
            # libsndfile's PEAK chunk (float files) holds the time of writing, which would
            # make repeated runs differ; with SOURCE_DATE_EPOCH it is left out
            # (soundfile's own libsndfile handle: a soundfile without it keeps the chunk,
            # and tests/test_run.py's reproducibility check says so)
            snd, ffi = getattr(sf, "_snd", None), getattr(sf, "_ffi", None)
            if snd is not None and ffi is not None:
                snd.sf_command(self.f._file, SFC_SET_ADD_PEAK_CHUNK, ffi.NULL, 0)
        meta = self._meta()
        if meta:
            try:
                self.f.comment = meta
                # what the reader takes from the comment: the JSON text's values (names and
                # units are str, t0 a float: each reads back as the same value)
                self.stored_names = (list(self.channels), list(self.units), float(self.t0))
            except (sf.LibsndfileError, RuntimeError):
                pass  # container without string chunks (e.g. OGG): names and units not kept

    def write(self, block: np.ndarray) -> None:
        if self._identity:  # full scale 1, offset 0: (x - 0) / 1 is x, bit for bit
            x = np.asarray(block, dtype=np.float64)
        else:
            x = (block - self.offset) / self.scale
        if x.shape[0] == 0:
            return
        flat, peak = _abs_peak(x)
        if peak > self.peak or not math.isfinite(peak):
            self.peak = peak
            self.peak_at = divmod(flat, x.shape[1])
            self.peak_at = (self.peak_at[0] + self.count, self.peak_at[1])
        if not math.isfinite(peak):  # NaN wins argmax/argmin, inf is the largest
            i, c = np.argwhere(~np.isfinite(x))[0]
            raise WaveformError(f"{self.where}: sample {self.count + i}, channel "
                                f"{self.channels[c]!r} is {x[i, c]}; audio cannot hold it")
        if self.spool is not None:
            x.astype(np.float64).tofile(self.spool)
            self.count += x.shape[0]
            return
        self._encode(x, peak)
        self.count += x.shape[0]

    def _normalizing_gain(self, peak: float) -> float:
        """Gain of ``on_clip='normalize'``: a peak beyond full scale is scaled to the
        normalize level (1.0 otherwise: a record that fits is left as it is)."""
        if not peak > 1.0:
            return 1.0
        return self.normalize_to / peak

    def _encode(self, x: np.ndarray, peak: float | None = None) -> None:
        # ``peak``: the block's largest |x| when known; within the limit (and no gain), no
        # sample is beyond it, and the search for one (a pass and a mask) is left out
        within = self.gain == 1.0 and peak is not None and peak <= self.limit
        if self.gain != 1.0:
            x = x * self.gain
        if not within and math.isfinite(self.limit):
            over = np.abs(x) > self.limit
            if over.any():
                if self.on_clip == "error":
                    i, c = np.argwhere(over)[0]
                    n = self.count + int(i)
                    at = (f"sample {n} (t = {self.t0 + n / self.rate:.6g} s), "
                          f"channel {self.channels[c]!r}")
                    if self.bounded:
                        raise WaveformError(
                            f"{self.where}: {at} exceeds digital full scale (peak so far "
                            f"{dbfs(self.peak):+.2f} dBFS, {dbfs(self.peak):.2f} dB over) for "
                            f"{self.subtype}; give --on-clip normalize (scales the peak to "
                            f"--normalize-level, default {NORMALIZE_LEVEL_DBFS:g} dBFS) or "
                            f"--on-clip clip, or write floats (--subtype FLOAT)"
                        )
                    raise WaveformError(
                        f"{self.where}: {at} is {x[i, c]:.6g}, beyond the range of 32-bit "
                        f"float samples (FLOAT, largest {self.limit:.4g}); it would be stored "
                        f"as infinite. Write 64-bit samples (--subtype DOUBLE) or another "
                        f"format (.h5, .csv), or scale it (--on-clip normalize or clip)"
                    )
                self.clipped += int(np.count_nonzero(over))
                x = np.clip(x, -self.limit, self.limit)
        bits = PCM_BITS.get(self.subtype)
        if bits:
            top = 2.0 ** (bits - 1)
            q = np.clip(np.rint(x * top), -top, top - 1)
            if bits == 8:
                data = (q.astype(np.int16) << 8)
            elif bits == 16:
                data = q.astype(np.int16)
            elif bits == 24:
                data = q.astype(np.int32) << 8
            else:
                data = q.astype(np.int32)
        elif self.subtype == "FLOAT":
            # rounded to binary32 here, as libsndfile's own conversion does (a plain C cast:
            # round to nearest), so the same bytes; libsndfile then stores the block with
            # one write where doubles go through its 8 kB buffer (~240 writes a 10-s
            # record, a quarter of its cost)
            data = x.astype(np.float32)
        else:
            data = np.ascontiguousarray(x, dtype=np.float64)
        self.f.write(data)

    def close(self) -> WriteResult:
        if self.spool is not None:
            self.spool.close()
            self.gain = self._normalizing_gain(self.peak)
            self._open()
            count, self.count = self.count, 0
            step = READ_CHUNK * 4
            with open(self.spool_path, "rb") as fh:
                while self.count < count:
                    x = np.fromfile(fh, dtype=np.float64, count=step * self.n_channels)
                    x = x.reshape(-1, self.n_channels)
                    self._encode(x)
                    self.count += x.shape[0]
            self._drop_spool()
        self.f.close()
        return WriteResult(
            self.where, self.format, self.subtype, self.count, self.n_channels, self.peak,
            dbfs(self.peak), self.clipped, self.gain,
        )

    def read_back(self) -> tuple[Any, dict[str, Any]] | None:
        """What reading the finished file gives back, known without reading it, or None.

        Returns ``(convert, metadata)``: ``convert(samples)`` turns the float64 samples
        given to :meth:`write` into the float64 values :class:`AudioSource` reads (FLOAT:
        rounded to binary32, which libsndfile stores by a plain conversion and reads back
        exactly; DOUBLE: unchanged), and ``metadata`` holds the ``rate``, ``t0``,
        ``channels`` and ``units`` the reader reports (from the comment the file holds).
        None where only reading tells: integer, companded or compressed codings, other
        containers, calibrated or normalized records, clipped samples, names not stored.
        """
        if (self.subtype not in FLOAT_SUBTYPES or self.format not in ("WAV", "WAVEX")
                or not self._identity or self.calibrated or self.gain != 1.0 or self.clipped
                or self.stored_names is None):
            return None
        channels, units, t0 = self.stored_names
        if not (len(channels) == self.n_channels and len(units) == self.n_channels
                and all(type(c) is str for c in channels + units) and math.isfinite(t0)):
            return None
        convert = _through_float32 if self.subtype == "FLOAT" else _unchanged
        return convert, {"rate": float(self.rate), "t0": t0, "channels": list(channels),
                         "units": list(units)}

    def _drop_spool(self) -> None:
        if self.spool is not None:
            self.spool.close()
            try:
                os.unlink(self.spool_path)
            except FileNotFoundError:
                pass
            self.spool = None

    def abort(self) -> None:
        self._drop_spool()
        if self.f is not None:
            try:
                self.f.close()
            except (sf.LibsndfileError, RuntimeError):
                pass
