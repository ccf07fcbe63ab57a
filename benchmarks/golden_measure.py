# ruff: noqa: E501, B023, E702, E402, E401 - a dump script: each lambda runs at once in put()
"""Golden measurements: measure a fixed, varied set of records and write their results as
JSON text, to compare two trees' numbers (the same numbers must stay the same bits).

Run, once per tree (the same folder for both: the files' paths are in the results):
    SOURCE_DATE_EPOCH=1700000000 PYTHONPATH=<tree> python benchmarks/golden_measure.py A.json
    python benchmarks/golden_measure.py --compare A.json B.json [--diff]

The set (917 records): the 320-record corpus of tests/test_measure_corpus.py with and
without its reference, a quarter of them also in 1000-sample blocks; short steps, steps at
the first sample, sines, tones, a tone with a step, a ramp, noise, pulse trains,
staircases with hum, multichannel, a System, the demo's three records; WAV files measured
in memory and forced to stream, a CSV with a reference channel; and long batch pairs: 14
ten-second 48 kHz WAVs (the bench_batch_overhead steps and pulses, a sine, a pulse train,
noise, a staircase) x 3 systems through ``run.execute`` with metrics: each pair's metrics,
its run report's channels and write result, and a digest of the output file's samples.
``GOLD_STEP=N`` takes every N-th corpus record; ``GOLD_DIR`` the folder for the files.
"""
import json, os, sys, time, tempfile

if len(sys.argv) > 1 and sys.argv[1] == "--compare":
    a, b = (json.load(open(p)) for p in sys.argv[2:4])
    diff = [k for k in a if a[k] != b.get(k)] + [k for k in b if k not in a]
    print(f"{len(a)} records; {len(a) - len(diff)} of {len(a)} identical; differ: {diff[:30]}")
    if diff and "--diff" in sys.argv:
        import difflib
        k = diff[0]
        x = json.dumps(json.loads(a[k]), indent=1, sort_keys=True).splitlines() if not a[k].startswith("ERROR") else [a[k]]
        y = json.dumps(json.loads(b[k]), indent=1, sort_keys=True).splitlines() if not b[k].startswith("ERROR") else [b[k]]
        print("\n".join(list(difflib.unified_diff(x, y, lineterm=""))[:60]))
    sys.exit(1 if diff else 0)
import numpy as np
sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests"))
import simwave
from simwave import Waveform
from scipy import signal
import soundfile as sf
from test_measure_corpus import make_record

out = {}
def put(name, fn):
    try:
        r = fn()
        out[name] = r.to_json() if hasattr(r, "to_json") else json.dumps(r, sort_keys=True, default=str)
    except Exception as e:
        out[name] = f"ERROR {type(e).__name__}: {e}"

t0 = time.time()
step = int(os.environ.get("GOLD_STEP", "1"))
for i in range(0, 320, step):
    rec = make_record(i)
    put(f"corpus{i}", lambda: simwave.measure(rec["y"], reference=rec["x"]))
    put(f"corpus{i}-oo", lambda: simwave.measure(rec["y"]))
    if i % 4 == 0:
        put(f"corpus{i}-b1000", lambda: simwave.measure(rec["y"], reference=rec["x"], block_size=1000))
        put(f"corpus{i}-oo-b1000", lambda: simwave.measure(rec["y"], block_size=1000))
print("corpus", time.time() - t0, file=sys.stderr)

fs = 48000.0
rng = np.random.default_rng(3)
sos = signal.butter(2, 2000, fs=fs, output="sos")
for n in (100, 800, 2400, 9600, 48000):
    t = np.arange(n) / fs
    x = np.zeros(n); x[n // 4:] = 1.0
    y = signal.sosfilt(sos, x)
    put(f"short{n}", lambda: simwave.measure(Waveform(y, fs), reference=Waveform(x, fs)))
    put(f"short{n}-oo", lambda: simwave.measure(Waveform(y, fs)))
    put(f"short{n}-n", lambda: simwave.measure(Waveform(y + 0.01 * rng.standard_normal(n), fs), reference=Waveform(x, fs)))
    put(f"first{n}", lambda: simwave.measure(Waveform(signal.sosfilt(sos, np.ones(n)), fs), reference=Waveform(np.ones(n), fs)))
for f in (50.0, 997.0, 5000.0):
    for n in (4800, 48000, 200000):
        t = np.arange(n) / fs
        x = np.sin(2 * np.pi * f * t)
        y = signal.sosfilt(sos, x)
        put(f"sine{f}-{n}", lambda: simwave.measure(Waveform(y, fs), reference=Waveform(x, fs)))
        put(f"sine{f}-{n}-oo", lambda: simwave.measure(Waveform(y + 0.001 * rng.standard_normal(n), fs)))
n = 96000; t = np.arange(n) / fs
x = np.sin(2*np.pi*100*t) + 0.5*np.sin(2*np.pi*700*t) + 0.3*np.sin(2*np.pi*3100*t)
put("tones", lambda: simwave.measure(Waveform(signal.sosfilt(sos, x), fs), reference=Waveform(x, fs)))
put("tones-oo", lambda: simwave.measure(Waveform(signal.sosfilt(sos, x), fs)))
x2 = x.copy(); x2[80000:] += 0.5
put("tones-step", lambda: simwave.measure(Waveform(signal.sosfilt(sos, x2), fs), reference=Waveform(x2, fs)))
put("ramp", lambda: simwave.measure(Waveform(signal.sosfilt(sos, t), fs), reference=Waveform(t, fs)))
for n in (2000, 50000, 300000):
    put(f"noise{n}", lambda: simwave.measure(Waveform(0.1 * rng.standard_normal(n), fs)))
# trains
for period, n in ((0.01, 48000), (0.002, 96000), (0.05, 480000)):
    t = np.arange(n) / fs
    x = ((t % period) < period / 2).astype(float)
    y = signal.sosfilt(sos, x)
    put(f"train{period}", lambda: simwave.measure(Waveform(y, fs), reference=Waveform(x, fs)))
    put(f"train{period}-oo", lambda: simwave.measure(Waveform(y, fs)))
    put(f"train{period}-oo-n", lambda: simwave.measure(Waveform(y + 0.01 * rng.standard_normal(n), fs)))
# staircases
n = 48000; x = np.zeros(n)
for k, lv in enumerate([1, 2.5, 0.5, 1.5]):
    x[(k + 1) * n // 5:] = lv
sos2 = signal.butter(2, 200, fs=fs, output="sos")
y = signal.sosfilt(sos2, x)
hum = 0.2 * np.sin(2 * np.pi * 60 * np.arange(n) / fs)
put("stair", lambda: simwave.measure(Waveform(y, fs), reference=Waveform(x, fs)))
put("stair-oo", lambda: simwave.measure(Waveform(y, fs)))
put("stair-hum", lambda: simwave.measure(Waveform(y + hum + 0.02*rng.standard_normal(n), fs), reference=Waveform(x + hum, fs)))
put("stair-hum-oo", lambda: simwave.measure(Waveform(y + hum + 0.02*rng.standard_normal(n), fs)))
# multichannel
Y = np.column_stack([y, 2 * y + 0.01 * rng.standard_normal(n), -y])
put("multi", lambda: simwave.measure(Waveform(Y, fs), reference=Waveform(x, fs)))
put("multi-oo", lambda: simwave.measure(Waveform(Y, fs)))
# with a system
sysm = simwave.System.parse("(2*pi*200)^2/(s^2+1.414*2*pi*200*s+(2*pi*200)^2)") if hasattr(simwave, "System") else None
if sysm is not None:
    put("stair-sys", lambda: simwave.measure(Waveform(y, fs), reference=Waveform(x, fs), system=sysm))
# demo records
from simwave.demo import parcel_signal
for m, seed in ((None, 1), (1.0, 2), (5.0, 3)):
    w = parcel_signal(m, seed)
    put(f"demo{m}", lambda: simwave.measure(w))
print("arrays", time.time() - t0, file=sys.stderr)

# files
d = os.environ.get("GOLD_DIR", os.path.join(tempfile.gettempdir(), "simwave-golden")); os.makedirs(d, exist_ok=True)
n = 3 * 48000 * 20  # 2.88 M values: streams
t = np.arange(n) / fs
period = n / 40
k = np.arange(n)
ph = (k % period) / period; up = ph < 0.5
since = np.where(up, k % period, k % period - period / 2)
ytr = np.where(up, 1 - np.exp(-since / 96.0), np.exp(-since / 96.0))
xtr = up.astype(float)
sf.write(f"{d}/tr-y.wav", ytr.astype(np.float32), 48000, subtype="FLOAT")
sf.write(f"{d}/tr-x.wav", xtr.astype(np.float32), 48000, subtype="FLOAT")
sf.write(f"{d}/sine.wav", (0.5*np.sin(2*np.pi*1000*t)).astype(np.float32), 48000, subtype="FLOAT")
sf.write(f"{d}/noise.wav", (0.1*rng.standard_normal(n)).astype(np.float32), 48000, subtype="FLOAT")
sf.write(f"{d}/st2.wav", np.column_stack([x, y]).astype(np.float32), 48000, subtype="FLOAT")
np.savetxt(f"{d}/st2.csv", np.column_stack([np.arange(n // 10)/fs, x[:n//10] if False else np.resize(x, n//10), np.resize(y, n//10)]), delimiter=",", header="time,in,out", comments="")
put("f-tr-oo", lambda: simwave.measure(f"{d}/tr-y.wav"))
put("f-tr", lambda: simwave.measure(f"{d}/tr-y.wav", reference=f"{d}/tr-x.wav"))
put("f-sine", lambda: simwave.measure(f"{d}/sine.wav"))
put("f-noise", lambda: simwave.measure(f"{d}/noise.wav"))
put("f-st2", lambda: simwave.measure(f"{d}/st2.wav", reference_channel=0))
put("f-st2-oo", lambda: simwave.measure(f"{d}/st2.wav"))
put("f-csv", lambda: simwave.measure(f"{d}/st2.csv", reference_channel="in"))
import importlib; S = importlib.import_module("simwave.measure.source")
old = S.IN_MEMORY_VALUES
S.IN_MEMORY_VALUES = 1000
put("f-st2-stream", lambda: simwave.measure(f"{d}/st2.wav", reference_channel=0))
put("f-st2-oo-stream", lambda: simwave.measure(f"{d}/st2.wav"))
S.IN_MEMORY_VALUES = 1 << 40
put("f-tr-oo-mem", lambda: simwave.measure(f"{d}/tr-y.wav"))
put("f-tr-mem", lambda: simwave.measure(f"{d}/tr-y.wav", reference=f"{d}/tr-x.wav"))
S.IN_MEMORY_VALUES = old
print("files", time.time() - t0, file=sys.stderr)

# long batch pairs: the bench_batch_overhead long files (and a sine, a step train, noise)
# through run.execute with metrics, 3 systems; metrics and the output file's bytes
import hashlib
from simwave.run import RunJob, execute
SYSTEMS = ["(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)", "1/(2m*s + 1)",
           "(2*pi*1k)^4/((s^2 + 0.7654*2*pi*1k*s + (2*pi*1k)^2)*(s^2 + 1.8478*2*pi*1k*s + (2*pi*1k)^2))"]
ld = os.path.join(d, "long"); os.makedirs(ld, exist_ok=True)
lo = os.path.join(d, "lout"); import shutil; shutil.rmtree(lo, ignore_errors=True); os.makedirs(lo)
rng2 = np.random.default_rng(5)
m = 480000
names = []
for i in range(10):
    x = np.zeros(m); start = int(m * (0.1 + 0.3 * (i % 5) / 5)); stop = m if i % 2 else start + m // 3
    x[start:stop] = 0.2 + 0.1 * (i % 3); x += 1e-3 * rng2.standard_normal(m)
    sf.write(f"{ld}/rec{i}.wav", x, 48000, subtype="FLOAT"); names.append(f"rec{i}")
tt = np.arange(m) / fs
sf.write(f"{ld}/sine.wav", 0.3 * np.sin(2 * np.pi * 50 * tt), 48000, subtype="FLOAT"); names.append("sine")
sf.write(f"{ld}/train.wav", 0.25 * ((tt % 0.1) < 0.05) + 1e-3 * rng2.standard_normal(m), 48000, subtype="FLOAT"); names.append("train")
sf.write(f"{ld}/noise.wav", 0.1 * rng2.standard_normal(m), 48000, subtype="FLOAT"); names.append("noise")
sf.write(f"{ld}/stair.wav", np.repeat([0.0, 0.1, 0.25, 0.05, 0.15], m // 5) + 2e-3 * rng2.standard_normal(m), 48000, subtype="FLOAT"); names.append("stair")
for nm in names:
    for j, s in enumerate(SYSTEMS):
        def job(nm=nm, j=j, s=s):
            r = execute(RunJob(system=s, source=f"{ld}/{nm}.wav", output=f"{lo}/{nm}-{j}.wav", metrics=f"{lo}/{nm}-{j}.json"))
            h = [hashlib.sha256(sf.read(f"{lo}/{nm}-{j}.wav", dtype="float32")[0].tobytes()).hexdigest()]
            doc = json.load(open(f"{lo}/{nm}-{j}.json")); met = doc["metrics"]; met["_run"] = {k: doc["run"].get(k) for k in ("channels", "samples", "duration_s", "write", "warnings")}
            return json.dumps({"metrics": met, "wav": h, "metrics_error": r.get("metrics_error")}, sort_keys=True)
        put(f"long-{nm}-{j}", job)
print("long", time.time() - t0, file=sys.stderr)
json.dump(out, open(sys.argv[1], "w"), indent=0, sort_keys=True)
print(len(out), "records", sum(v.startswith("ERROR") for v in out.values()), "errors", file=sys.stderr)
