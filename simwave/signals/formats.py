"""Which reader or writer handles a file: from the ``format`` option or the extension."""

from __future__ import annotations

import functools
import os

import soundfile as sf

from simwave.errors import WaveformError

CSV_EXTENSIONS = {".csv", ".txt", ".tsv", ".dat"}
HDF5_EXTENSIONS = {".h5", ".hdf5", ".hdf", ".he5"}

# soundfile's major formats, by the extension users give them; plus common aliases.
_AUDIO_ALIASES = {
    "aif": "AIFF", "aiff": "AIFF", "aifc": "AIFF", "oga": "OGG", "opus": "OGG",
    "snd": "AU", "sf": "IRCAM", "mp3": "MP3",
}


def audio_formats() -> dict[str, str]:
    """Extension (lower case, no dot) -> soundfile major format name (a new dict each call)."""
    return dict(_audio_formats())


@functools.lru_cache(maxsize=1)
def _audio_formats() -> dict[str, str]:
    # libsndfile's format list does not change while the process runs; asking it costs
    # ~0.6 ms, and a short batch pair resolved formats ~25 times.
    available = sf.available_formats()
    table = {name.lower(): name for name in available}
    for ext, fmt in _AUDIO_ALIASES.items():
        if fmt in available:
            table.setdefault(ext, fmt)
    # RAW needs its layout spelled out; MAT4/MAT5 are numeric containers, not audio.
    for odd in ("raw", "mat4", "mat5"):
        table.pop(odd, None)
    return table


def resolve_format(path: str, format: str | None = None) -> tuple[str, str | None]:
    """Family and audio major format for ``path``.

    Parameters
    ----------
    path : str
        File name; its extension decides unless ``format`` is given.
    format : str, optional
        ``"csv"``, ``"hdf5"`` (or ``"h5"``), or an audio format name known to
        soundfile (``"wav"``, ``"flac"``, ``"rf64"``, ``"wavex"``, ``"aiff"``, ...).

    Returns
    -------
    (family, audio_format)
        ``family`` is ``"audio"``, ``"csv"`` or ``"hdf5"``; ``audio_format`` is the
        soundfile major format name for audio, else None.
    """
    audio = _audio_formats()
    if format:
        key = str(format).lower().lstrip(".")
        if key in ("csv", "txt", "tsv", "dat", "text"):
            return "csv", None
        if key in ("hdf5", "h5", "hdf"):
            return "hdf5", None
        if key in audio:
            return "audio", audio[key]
        raise WaveformError(
            f"{path}: unknown format {format!r}; use csv, hdf5 or an audio format "
            f"({', '.join(sorted(audio))})"
        )
    ext = os.path.splitext(str(path))[1].lower()
    if ext in CSV_EXTENSIONS:
        return "csv", None
    if ext in HDF5_EXTENSIONS:
        return "hdf5", None
    if ext[1:] in audio:
        return "audio", audio[ext[1:]]
    shown = ext or "(none)"
    raise WaveformError(
        f"{path}: unknown file extension {shown}; use .wav/.flac/... (audio), .csv/.txt "
        f"(CSV) or .h5/.hdf5 (HDF5), or name the format: --input-format FMT to read, "
        f"--format FMT to write"
    )
