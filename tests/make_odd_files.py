"""Make the corpus of odd input files the fault suite feeds to every command.

Each file is built here from code (no binary blobs in the repository): CSV text
that is malformed in one way, audio in codecs that cannot seek, HDF5 files with
odd attributes, sparse or external storage, system TOML files nested or typed
wrongly. Run as a script to write them into a folder:

    python tests/make_odd_files.py FOLDER
"""

from __future__ import annotations

import os
import sys

import h5py
import numpy as np
import soundfile as sf

#: What each file is meant to exercise (name -> description).
CORPUS: dict[str, str] = {}


def _register(name: str, what: str) -> str:
    CORPUS[name] = what
    return name


def _csv(folder: str, name: str, what: str, text: str, newline: str = "\n") -> None:
    with open(os.path.join(folder, _register(name, what)), "w", newline="") as fh:
        fh.write(text.replace("\n", newline))


def _series(n: int = 200, rate: float = 1000.0) -> tuple[np.ndarray, np.ndarray]:
    t = np.arange(n) / rate
    return t, np.where(t >= 0.05, 1.0, 0.0)


def _table(t, x) -> str:
    return "time,x\n" + "".join(f"{float(a)!r},{float(b)!r}\n" for a, b in zip(t, x, strict=True))


def make_csv(folder: str) -> None:
    t, x = _series()
    _csv(folder, "time-backwards.csv", "time goes backwards at row 100",
         _table(np.concatenate([t[:100], t[100:][::-1]]), x))
    _csv(folder, "time-constant.csv", "every row has the same time", _table(np.zeros(50), x[:50]))
    _csv(folder, "cr-only.csv", "old Mac line endings (CR only)", _table(t, x), newline="\r")
    _csv(folder, "huge-values.csv", "values of 1e308 (x2 overflows)", _table(t, x * 1e308))
    _csv(folder, "tiny-values.csv", "subnormal values (5e-324)", _table(t, x * 5e-324))
    _csv(folder, "giant-step.csv", "time steps of 1e300 s", _table(t * 1e303, x))
    _csv(folder, "empty.csv", "an empty file", "")
    _csv(folder, "header-only.csv", "a header and no rows", "time,x\n")
    _csv(folder, "one-row.csv", "a single data row", "time,x\n0,1\n")
    _csv(folder, "words.csv", "text where numbers should be", "time,x\n0,a\n1,b\n2,c\n")
    _csv(folder, "nan-inf.csv", "NaN and infinite samples", _table(t, np.where(
        np.arange(t.size) % 7 == 0, np.nan, np.where(np.arange(t.size) % 11 == 0, np.inf, x))))
    _csv(folder, "ragged.csv", "rows of different lengths", "time,x,y\n0,1,2\n1,2\n2,3,4,5\n")
    _csv(folder, "bom-semicolon.csv", "byte-order mark and semicolons",
         "\ufefftime;x\n" + "".join(f"{float(a)};{float(b)}\n" for a, b in zip(t, x, strict=True)))
    _csv(folder, "constant.csv", "a constant waveform (nothing to measure)",
         _table(t, np.ones_like(t)))
    with open(os.path.join(folder, _register("binary.csv", "random bytes named .csv")),
              "wb") as fh:
        fh.write(np.random.default_rng(7).integers(0, 256, 4000, dtype=np.uint8).tobytes())


def make_audio(folder: str) -> None:
    x = 0.5 * np.sin(np.arange(8000) / 10.0)
    # Codecs libsndfile cannot seek in (its "Seek attempted on unseekable file type").
    for fmt, subtype, ext in (("WAV", "GSM610", "wav"), ("WAV", "G721_32", "wav"),
                              ("AU", "G723_24", "au"), ("WAV", "NMS_ADPCM_16", "wav")):
        name = _register(f"codec-{subtype}.{ext}", f"{subtype} audio (cannot seek)")
        sf.write(os.path.join(folder, name), x, 8000, subtype=subtype, format=fmt)
    good = os.path.join(folder, _register("truncated.wav", "header promises more frames"))
    sf.write(good, x, 8000, subtype="PCM_16")
    with open(good, "r+b") as fh:
        fh.truncate(os.path.getsize(good) - 6000)
    with open(os.path.join(folder, _register("header-only.wav", "a WAV header, no data")),
              "wb") as fh:
        fh.write(b"RIFF\x24\x00\x00\x00WAVEfmt \x10\x00\x00\x00\x01\x00\x01\x00"
                 b"\x40\x1f\x00\x00\x80\x3e\x00\x00\x02\x00\x10\x00data\x00\x00\x00\x00")
    _csv(folder, "text.wav", "text named .wav", "not audio at all\n")


def _h5(folder: str, name: str, what: str, data=None, **attrs) -> None:
    with h5py.File(os.path.join(folder, _register(name, what)), "w") as f:
        d = f.create_dataset("x", data=np.sin(np.arange(1000) / 10.0)[:, None]
                             if data is None else data)
        for k, v in attrs.items():
            d.attrs[k] = v


def make_hdf5(folder: str) -> None:
    _h5(folder, "rate-text.h5", "rate attribute is text", rate="fast")
    _h5(folder, "rate-array.h5", "rate attribute is an array", rate=np.array([1e3, 2e3]))
    _h5(folder, "rate-complex.h5", "rate attribute is complex", rate=1000 + 1j)
    _h5(folder, "rate-bool.h5", "rate attribute is True", rate=True)
    _h5(folder, "rate-negative.h5", "rate attribute is negative", rate=-5.0)
    _h5(folder, "dt-zero.h5", "sample interval dt = 0", dt=0.0)
    _h5(folder, "no-rate.h5", "no rate at all")
    _h5(folder, "three-d.h5", "a 3-D dataset", data=np.zeros((4, 3, 2)), rate=1e3)
    _h5(folder, "strings.h5", "a dataset of text", data=np.array([b"a", b"b"]), rate=1e3)
    _h5(folder, "empty.h5", "an empty dataset", data=np.zeros((0, 1)), rate=1e3)
    _h5(folder, "huge-rate.h5", "rate 1e300 Hz", rate=1e300)
    _h5(folder, "tiny-rate.h5", "rate 1e-300 Hz", rate=1e-300)
    with h5py.File(os.path.join(folder, _register(
            "sparse.h5", "1e12 samples declared, none stored (fill value)")), "w") as f:
        d = f.create_dataset("x", shape=(10**12, 1), chunks=(1 << 20, 1), dtype="f8")
        d.attrs["rate"] = 1e6
    os.makedirs(os.path.join(folder, "external"), exist_ok=True)
    np.sin(np.arange(1000) / 10.0).astype("<f8").tofile(os.path.join(folder, "external",
                                                                      "raw.bin"))
    with h5py.File(os.path.join(folder, _register(
            "external/stored-beside.h5", "samples in an external raw file beside it")), "w") as f:
        d = f.create_dataset("x", shape=(1000, 1), dtype="<f8",
                             external=[("raw.bin", 0, h5py.h5f.UNLIMITED)])
        d.attrs["rate"] = 1e3
    with h5py.File(os.path.join(folder, _register(
            "external-missing.h5", "external raw file that does not exist")), "w") as f:
        d = f.create_dataset("x", shape=(1000, 1), dtype="<f8",
                             external=[("nowhere.bin", 0, h5py.h5f.UNLIMITED)])
        d.attrs["rate"] = 1e3
    _csv(folder, "text.h5", "text named .h5", "not HDF5\n")


def make_systems(folder: str) -> None:
    depth = 100_000
    _csv(folder, "nested.toml", "a system TOML nested 100,000 deep",
         "x = " + "[" * depth + "]" * depth + "\n")
    with open(os.path.join(folder, _register("latin1.toml", "system TOML not in UTF-8")),
              "wb") as fh:
        fh.write(b'name = "caf\xe9"\n[coefficients]\nnumerator = [1]\ndenominator = [1, 1]\n')
    _csv(folder, "wrong-types.toml", "coefficients of the wrong type",
         '[coefficients]\nnumerator = "one"\ndenominator = {a = 1}\n')
    for key, value in (("ripple", 'ripple_db = 1e300'), ("attenuation", "attenuation_db = 1e-300"),
                       ("cutoff", "cutoff_hz = 1e300"), ("order", "order = 100000")):
        family = "chebyshev1" if key == "ripple" else (
            "chebyshev2" if key == "attenuation" else "butterworth")
        order = "" if key == "order" else "order = 4\n"
        cutoff = "" if key == "cutoff" else "cutoff_hz = 100\n"
        _csv(folder, f"design-{key}.toml", f"a design with an absurd {key}",
             f'[design]\nfamily = "{family}"\nkind = "lowpass"\n{order}{cutoff}{value}\n')


def make_corpus(folder: str) -> dict[str, str]:
    """Write every odd file into ``folder``; return name -> what it exercises."""
    CORPUS.clear()
    os.makedirs(folder, exist_ok=True)
    make_csv(folder)
    make_audio(folder)
    make_hdf5(folder)
    make_systems(folder)
    return dict(CORPUS)


if __name__ == "__main__":  # pragma: no cover - a helper for looking at the files by hand
    made = make_corpus(sys.argv[1] if len(sys.argv) > 1 else "odd-files")
    for n, what in made.items():
        print(f"{n:32s} {what}")
