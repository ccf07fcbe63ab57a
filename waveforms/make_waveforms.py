"""Make the small demo waveforms in this folder (invented data, seeded, deterministic).

    python waveforms/make_waveforms.py            # rewrite the files beside this script
    python waveforms/make_waveforms.py --out DIR  # write them somewhere else

Every scenario and number here is invented for simwave:

strain-step.csv
    Test beam on a bending rig: at t = 10 ms a load is set on the beam and the
    strain-gauge bridge output steps from its 0.15 mV imbalance to 1.35 mV
    (10-90 % in 0.2 ms), with 5 µV RMS amplifier noise. 20 kHz, 50 ms, one
    channel ``bridge`` in mV, CSV with a time column. Goes with
    ``examples/strain_gauge_front_end.toml``.
thermocouple-hum.wav
    Slow temperature channel of a kiln controller: the amplifier output (V)
    sits at 0.42 V and climbs 20 mV/s as the kiln heats, with 50 mV of 50 Hz
    mains pickup and 2 mV RMS noise. 1 kHz, 4 s, 32-bit float WAV. Goes with
    ``examples/mains_hum_notch.toml``.
valve-actuator.h5
    Proportional valve on a test stand, two channels at 10 kHz for 0.3 s:
    ``command`` (0 to 5 V pulses, 40 ms every 100 ms, 0.1 ms edges) and
    ``position`` (the spool position sensor, V), made by running the command
    through an invented second-order actuator (80 Hz natural frequency, damping
    0.45, 0.6 V/V) plus 3 mV RMS sensor noise. HDF5 dataset ``/waveform``.
"""

from __future__ import annotations

import argparse
import os

import numpy as np
from scipy import signal

import simwave

HERE = os.path.dirname(os.path.abspath(__file__))


def strain_step() -> simwave.Waveform:
    rate, duration = 20_000.0, 0.05
    step = simwave.generate("step", rate, duration, time=0.01, base=0.15, level=1.35,
                            rise=0.2e-3)
    noise = simwave.generate("white-noise", rate, duration, amplitude=0.005, seed=101)
    return simwave.Waveform(step.data + noise.data, rate, channels=["bridge"], units=["mV"],
                            attrs={"scenario": "bending-rig test beam, load set at 10 ms "
                                               "(invented data)"})


def thermocouple_hum() -> simwave.Waveform:
    rate, duration = 1000.0, 4.0
    climb = simwave.generate("ramp", rate, duration, slope=0.02, base=0.42)
    hum = simwave.generate("sine", rate, duration, frequency=50.0, amplitude=0.05, phase=40.0)
    noise = simwave.generate("white-noise", rate, duration, amplitude=0.002, seed=202)
    return simwave.Waveform(climb.data + hum.data + noise.data, rate,
                            channels=["temperature_amp"], units=["V"])


def valve_actuator() -> simwave.Waveform:
    rate, duration = 10_000.0, 0.3
    command = simwave.generate("pulse-train", rate, duration, width=0.04, period=0.1,
                               delay=0.01, base=0.0, level=5.0, edge=1e-4)
    wn, zeta, k = 2 * np.pi * 80.0, 0.45, 0.6
    # the invented actuator: k wn^2 / (s^2 + 2 zeta wn s + wn^2) (Ogata, Modern Control
    # Engineering, 5th ed., sec. 5-3, standard second-order form)
    t = command.time
    _, position, _ = signal.lsim(([k * wn**2], [1.0, 2 * zeta * wn, wn**2]),
                                 command.data[:, 0], t)
    noise = simwave.generate("white-noise", rate, duration, amplitude=0.003, seed=303)
    data = np.column_stack([command.data[:, 0], position + noise.data[:, 0]])
    return simwave.Waveform(data, rate, channels=["command", "position"], units=["V", "V"])


#: File name -> (maker, writer options).
FILES = {
    "strain-step.csv": (strain_step, {}),
    "thermocouple-hum.wav": (thermocouple_hum, {"subtype": "FLOAT"}),
    "valve-actuator.h5": (valve_actuator, {}),
}


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=HERE, help="folder to write into (default: beside "
                                                    "this script)")
    args = parser.parse_args(argv)
    os.makedirs(args.out, exist_ok=True)
    for name, (make, opts) in FILES.items():
        path = os.path.join(args.out, name)
        simwave.write(path, make(), **opts)
        print(f"{path}  {os.path.getsize(path) / 1024:.0f} kB")


if __name__ == "__main__":
    main()
