"""A short file run kept for measuring is read, filtered and written as one block: the same
output file samples and the same run report as the block-by-block run without metrics.

``run.simulate`` takes a file of at most ``run.KEEP_VALUES`` values in one block when
``run.execute`` keeps it for measuring (no copies into the kept arrays, no pipeline
threads). The reference for these checks is the ordinary run of the same job without a
metrics file (blocks of ``run.DEFAULT_BLOCK`` frames, read ahead and written behind on
threads), read back through soundfile (libsndfile) bit for bit.
"""

from __future__ import annotations

import numpy as np
import pytest
import soundfile as sf

import simwave.run as run
from simwave.errors import SimwaveError
from simwave.run import RunJob, execute

RATE = 48000.0
SYSTEMS = ["(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)",
           "(2*pi*1k)^4/((s^2 + 0.7654*2*pi*1k*s + (2*pi*1k)^2)"
           "*(s^2 + 1.8478*2*pi*1k*s + (2*pi*1k)^2))"]


def _record(folder, name, channels, subtype):
    rng = np.random.default_rng(len(name) + channels)
    n = 3 * run.DEFAULT_BLOCK + 1234  # several blocks and a short last one
    x = np.zeros((n, channels))
    x[n // 5:, 0] = 0.3
    if channels > 1:
        x[n // 3: 2 * n // 3, 1] = -0.2
    x += 1e-3 * rng.standard_normal((n, channels))
    path = str(folder / f"{name}.wav")
    sf.write(path, x, int(RATE), subtype=subtype)
    return path


def _report(result):
    r = result["run"]
    return {k: r[k] for k in ("samples", "channels", "write", "warnings")}


@pytest.mark.parametrize("channels,subtype", [(1, "FLOAT"), (1, "DOUBLE"), (2, "FLOAT")])
@pytest.mark.parametrize("system", SYSTEMS)
def test_one_block_run_writes_what_the_block_run_writes(tmp_path, channels, subtype, system):
    src = _record(tmp_path, f"in{channels}{subtype}", channels, subtype)
    plain = execute(RunJob(system=system, source=src, output=str(tmp_path / "a.wav")))
    kept = execute(RunJob(system=system, source=src, output=str(tmp_path / "b.wav"),
                          metrics=str(tmp_path / "b.json")))
    a, _ = sf.read(str(tmp_path / "a.wav"), dtype="float64", always_2d=True)
    b, _ = sf.read(str(tmp_path / "b.wav"), dtype="float64", always_2d=True)
    assert a.shape == b.shape and a.tobytes() == b.tobytes()
    # peaks, their times, the RMS (summed per block of DEFAULT_BLOCK frames in both) and the
    # input peaks: equal as numbers, not just close
    assert _report(plain) == _report(kept)
    assert kept["metrics"] is not None


def test_the_whole_block_is_taken_and_kept(tmp_path, monkeypatch):
    """The kept run filters one block (the model is called once) and keeps it without copying."""
    src = _record(tmp_path, "one", 1, "FLOAT")
    calls = []
    real = run._Kept.add

    def add(self, block):
        calls.append(block.shape[0])
        real(self, block)

    monkeypatch.setattr(run._Kept, "add", add)
    execute(RunJob(system=SYSTEMS[0], source=src, output=str(tmp_path / "o.wav"),
                   metrics=str(tmp_path / "o.json")))
    n = sf.info(src).frames
    assert calls == [n, n]  # the input block, then the output block, each whole


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_an_output_turning_infinite_fails_alike(tmp_path):
    """An unstable system's output overflows (past the first block: e^(200 t) beyond 1.8e308
    after about 3.5 s): the same one-line error (time, sample, channel) whether the run is
    kept for measuring or not, and no output file. (DOUBLE output: a FLOAT file refuses
    values beyond binary32's range earlier, from its writer, which the block run calls on
    its write-behind thread, so which of the two errors comes first there depends on the
    threads' timing.)"""
    src = _record(tmp_path, "grow", 1, "FLOAT")
    errors = []
    for name, metrics in (("a", None), ("b", str(tmp_path / "b.json"))):
        with pytest.raises(SimwaveError) as info:
            execute(RunJob(system="1/(s - 200)", source=src,
                           output=str(tmp_path / f"{name}.wav"), metrics=metrics,
                           write_options={"subtype": "DOUBLE"}))
        errors.append(str(info.value).replace(f"{name}.wav", "X.wav"))
        assert not (tmp_path / f"{name}.wav").exists()
    assert errors[0] == errors[1]
    assert "sample 174003" in errors[0]  # in the third block of 65,536


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_a_float_output_beyond_binary32_fails_at_its_first_such_sample(tmp_path):
    """Written piece by piece in order, the kept run refuses the first sample beyond
    binary32's range (the writer's error, in the first block), as a run that writes each
    block before filtering the next does, not the later overflow to infinity."""
    src = _record(tmp_path, "grow", 1, "FLOAT")
    with pytest.raises(SimwaveError, match=r"sample 24949 .*beyond the range of 32-bit"):
        execute(RunJob(system="1/(s - 200)", source=src, output=str(tmp_path / "b.wav"),
                       metrics=str(tmp_path / "b.json")))
    assert not (tmp_path / "b.wav").exists()
