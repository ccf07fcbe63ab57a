"""simwave from Python: run a recorded step through a front-end model, measure it, plot it.

    python examples/api_example.py [OUTPUT_DIR]   (default: a new temporary folder)

Nothing is written into the repository: without OUTPUT_DIR the files go to a fresh
temporary folder, whose name is printed at the end.

The recording (waveforms/strain-step.csv) and the front end
(examples/strain_gauge_front_end.toml) are invented examples.
"""

import os
import sys
import tempfile

import simwave
from simwave.plots import plot_frequency, plot_run

HERE = os.path.dirname(os.path.abspath(__file__))
if len(sys.argv) > 1:
    out_dir = sys.argv[1]
    os.makedirs(out_dir, exist_ok=True)
else:
    out_dir = tempfile.mkdtemp(prefix="simwave-api-example-")

# 1. the proposed system and a real-looking input
front_end = simwave.System.from_file(os.path.join(HERE, "strain_gauge_front_end.toml"))
bridge = simwave.read(os.path.join(HERE, "..", "waveforms", "strain-step.csv"))
print(f"system: {front_end.name}, DC gain {front_end.dc_gain:.4g}, poles {front_end.poles}")
print(f"input:  {bridge}")

# 2. run it (ramp-invariant: exact for samples joined by straight lines) and save the output
amplified = simwave.simulate(front_end, bridge, method="ramp-invariant")
simwave.write(os.path.join(out_dir, "strain-step-amplified.csv"), amplified)

# 3. measure the output against the input (IEEE Std 181 terms) and print the key numbers
result = simwave.measure(amplified, reference=bridge, system=front_end)
# (the simulation starts at rest, so the bridge's offset at the first sample is a step too;
# a value the record cannot give is None, and the reason is in the result)
m = simwave.key_metrics(result)["bridge"]


def shown(value, scale=1.0, unit=""):
    return "n/a" if value is None else f"{value * scale:.3f}{unit}"


print(f"rise time {shown(m['rise_time_s_mean'], 1e3, ' ms')}, "
      f"overshoot {shown(m['overshoot_pct_worst'], 1, ' %')}, "
      f"settling (2 %) {shown(m['settling_time_s_longest'], 1e3, ' ms')}, "
      f"steady-state gain {shown(m['steady_state_gain'])} "
      f"(H(0) = {m['predicted_dc_gain']:.2f})")
if m["missing"]:
    print(f"missing: {m['missing']}")

# 4. pictures: the step with its measured levels, and the frequency response at the input rate
plot_run(amplified, bridge, result, os.path.join(out_dir, "strain-step.png"))
plot_frequency(front_end, os.path.join(out_dir, "strain-front-end.png"), rate=bridge.rate)
print(f"wrote {out_dir}/strain-step-amplified.csv, strain-step.png, strain-front-end.png")
