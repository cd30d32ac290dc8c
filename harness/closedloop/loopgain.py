"""Loop gain measured in the closed-loop switching run, as a frequency-response analyser does
it on the bench: a small sine is added at the loop's feedback point (the ADC codes of the
inductor current, or of the bus voltage, after the converter and before the controller), and
the loop gain at that frequency is ``T = -Y / Y_m``, with ``Y`` the phasor of the true signal
(the plant's sampled current or bus) and ``Y_m = Y + X`` the one the controller saw.

All frequencies run as lanes of one lockstep batch, with one more lane of the same scenario
and no injection: the plant and the controller are deterministic, so lane minus reference is
the response to the injection alone (the line-frequency waveforms cancel). Each phasor is a
least-squares fit of a cosine and a sine over the periods where the loop is closed: the
supervisor in RUN with the gates on, and for the current loop the line away from its zero
crossings (|v| above 25 % of the peak), where blanking, the duty ramp and discontinuous
conduction open it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from design.contract import Channel, Mode
from design.project import Project
from design.tuning import LoopDesign, at_ref_gain, phase_crossover_Hz, ref_gain_A_per_V

from .loop import run
from .scenario import Scenario

# injection amplitude: of the sized peak line current, or of vout
INJECT_OF_PEAK = 0.03
INJECT_OF_VOUT = 0.01
# default points: multiples of the design's crossover
CURRENT_POINTS = (0.35, 0.5, 0.7, 0.85, 1.0, 1.2, 1.5, 2.0, 2.8, 3.4, 4.2)
VOLTAGE_POINTS = (0.4, 0.6, 0.8, 1.0, 1.25, 1.6, 2.2)
SETTLE_S = {"current": 0.3, "voltage": 0.4}  # from power-up to the start of the measurement
ZC_REGION = 0.25  # |v| below this of the line peak: the crossing handling opens the loop


@dataclass
class LoopGainResult:
    loop: str
    f_Hz: np.ndarray
    measured: np.ndarray  # complex loop gain at f_Hz
    design: np.ndarray  # the design's sampled-loop gain at f_Hz
    design_figures: dict
    scenario: Scenario
    injection: dict
    wall_s: float
    used_periods: list[int] = field(default_factory=list)

    def figures(self) -> dict:
        return margins_from_points(self.f_Hz, self.measured)

    def as_dict(self) -> dict:
        fig = self.figures()
        return {
            "loop": self.loop,
            **fig,
            "design": self.design_figures,
            "points": [
                {
                    "f_Hz": float(f),
                    "gain_dB": _db(g),
                    "phase_deg": _deg(g),
                    "design_gain_dB": _db(d),
                    "design_phase_deg": _deg(d),
                    "periods_used": n,
                }
                for f, g, d, n in zip(
                    self.f_Hz, self.measured, self.design, self.used_periods, strict=True
                )
            ],
            "injection": self.injection,
            "scenario": {
                "vrms_V": self.scenario.vrms_V,
                "freq_Hz": self.scenario.freq_Hz,
                "load_kind": self.scenario.load_kind,
                "load_power_W": self.scenario.load_power_W,
                "duration_s": self.scenario.duration_s,
            },
            "wall_s": self.wall_s,
        }


def _db(g: complex) -> float:
    return float(20.0 * math.log10(abs(g)))


def _deg(g: complex) -> float:
    """Phase in degrees, unwrapped into (-360, 0] as a loop gain's lag is read."""
    p = math.degrees(math.atan2(g.imag, g.real))
    return p - 360.0 if p > 0.0 else p


def margins_from_points(f_Hz: np.ndarray, g: np.ndarray) -> dict:
    """Crossover (|T| = 1, interpolated in log f against dB), the phase margin there
    (interpolated phase + 180) and the gain margin where the phase passes -180 deg; ``None``
    where the measured points do not bracket the crossing."""
    order = np.argsort(f_Hz)
    f, g = np.asarray(f_Hz)[order], np.asarray(g)[order]
    lf, db, ph = np.log(f), 20.0 * np.log10(np.abs(g)), np.array([_deg(x) for x in g])
    out: dict = {"crossover_Hz": None, "phase_margin_deg": None, "gain_margin_dB": None}
    for k in range(len(f) - 1):
        if db[k] >= 0.0 > db[k + 1]:
            t = db[k] / (db[k] - db[k + 1])
            out["crossover_Hz"] = float(math.exp(lf[k] + t * (lf[k + 1] - lf[k])))
            out["phase_margin_deg"] = float(180.0 + ph[k] + t * (ph[k + 1] - ph[k]))
            break
    for k in range(len(f) - 1):
        if ph[k] > -180.0 >= ph[k + 1]:
            t = (ph[k] + 180.0) / (ph[k] - ph[k + 1])
            out["gain_margin_dB"] = float(-(db[k] + t * (db[k + 1] - db[k])))
            break
    return out


GM_POINTS = (0.9, 0.95, 1.0, 1.05, 1.1)  # x the design's -180 deg crossing


def default_points(prj: Project, loop: str, scn: Scenario | None = None) -> np.ndarray:
    """Multiples of the design's crossover, and for the current loop five points around the
    design's -180 deg crossing (within 10 %, below 0.45 f_sw; at the operating point of
    ``scn`` when given) so that the gain margin is measured; moved off the line's harmonics
    (a point within 20 % of a harmonic's spacing from one is moved by 0.3 of the line
    frequency)."""
    lp = getattr(prj.tuning, loop) if scn is None else design_at(prj, loop, scn)
    fl = prj.config.spec.line_freq
    mult = CURRENT_POINTS if loop == "current" else VOLTAGE_POINTS
    targets = [m * lp.crossover_Hz for m in mult]
    f180 = phase_crossover_Hz(lp) if loop == "current" else None
    if f180 is not None:
        top = 0.45 * prj.config.spec.fsw
        targets += [k * f180 for k in GM_POINTS if k * f180 < top and k * f180 > targets[-1]]
    fs = []
    for f in targets:
        if f > 0.5 * fl and abs(f / fl - round(f / fl)) < 0.2:
            f += 0.3 * fl
        fs.append(f)
    return np.array(fs)


def design_at(prj: Project, loop: str, scn: Scenario) -> LoopDesign:
    """The design's loop at the scenario's operating point: the current loop with an input
    filter takes its reference's path at the scenario's load and line
    (``design.tuning.at_ref_gain``; the design places it at no load)."""
    lp: LoopDesign = getattr(prj.tuning, loop)
    if loop != "current" or not lp.line_num:
        return lp
    return at_ref_gain(lp, ref_gain_A_per_V(prj.config, scn.load_power_W, scn.vrms_V))


def default_scenario(prj: Project, loop: str, f_min_Hz: float) -> Scenario:
    """Nominal line, rated power, constant-power load (the design's small-signal case), long
    enough for the settling and six cycles of the lowest point (at least 0.2 s)."""
    s = prj.config.spec
    window = max(6.0 / f_min_Hz, 0.2)
    return Scenario(
        name=f"loopgain_{loop}",
        duration_s=SETTLE_S[loop] + window,
        vrms_V=s.vin_rms_nominal,
        freq_Hz=s.line_freq,
        load_kind="constant_power",
        load_power_W=s.power,
    )


def measure(
    prj: Project,
    loop: str,
    f_Hz: np.ndarray | None = None,
    scenario: Scenario | None = None,
    settle_s: float | None = None,
    progress: bool = False,
) -> LoopGainResult:
    if loop not in ("current", "voltage"):
        raise ValueError(f"loop must be 'current' or 'voltage', not {loop!r}")
    if scenario is None:
        first = default_points(prj, loop) if f_Hz is None else np.asarray(f_Hz, dtype=float)
        scn = default_scenario(prj, loop, float(first.min()))
    else:
        scn = scenario
    fs = default_points(prj, loop, scn) if f_Hz is None else np.asarray(f_Hz, dtype=float)
    settle = SETTLE_S[loop] if settle_s is None else settle_s
    if settle >= scn.duration_s:
        raise ValueError(
            f"the scenario ({scn.duration_s:g} s) ends before the measurement starts ({settle:g} s)"
        )
    r, spec = prj.resolved, prj.config.spec
    T = 1.0 / spec.fsw
    if loop == "current":
        ch, lsb, key = Channel.IL, r.il_A_per_count, "i_sample_A"
        amp = INJECT_OF_PEAK * prj.sizing.iline_peak_A
    else:
        ch, lsb, key = Channel.VBUS, r.vbus_V_per_count, "vbus_sample_V"
        amp = INJECT_OF_VOUT * spec.vout
    k0 = int(round(settle / T))
    n_f = len(fs)
    periods = int(round(scn.duration_s / T))
    injected = np.zeros((periods, n_f))  # what the controller saw added, in V or A

    def perturb(k: int, codes: np.ndarray) -> None:
        if k < k0:
            return
        raw = codes[1:, ch].astype(float)
        # each sine starts at zero phase when the injection starts, as an analyser's does: a
        # step into the reading would look like a sensor fault to the plausibility checks
        want = raw + amp * np.sin(2.0 * np.pi * fs * ((k - k0) * T)) / lsb
        new = np.clip(np.round(want), 0, r.adc_full_counts)
        injected[k] = (new - raw) * lsb
        codes[1:, ch] = new.astype(codes.dtype)

    res = run(prj, [scn] * (n_f + 1), progress=progress, perturb=perturb)
    d = res.data
    kk = np.arange(k0, res.periods)
    tt = kk * T
    closed = (d["mode"][kk] == Mode.RUN) & (d["gates"][kk] != 0)
    if loop == "current":
        vpk = math.sqrt(2.0) * scn.vrms_V
        closed &= np.abs(d["vs_V"][kk]) > ZC_REGION * vpk
    y = d[key][kk]
    meas, used = [], []
    for j, f in enumerate(fs):
        m = closed[:, 0] & closed[:, j + 1]
        if m.sum() < 20:
            raise RuntimeError(
                f"{loop} loop at {f:.4g} Hz: only {int(m.sum())} periods with the loop closed "
                "(the stage did not reach RUN: check the scenario)"
            )
        a = np.column_stack([np.cos(2 * np.pi * f * tt[m]), np.sin(2 * np.pi * f * tt[m])])
        dy = y[m, j + 1] - y[m, 0]
        cy = np.linalg.lstsq(a, dy, rcond=None)[0]
        cx = np.linalg.lstsq(a, injected[kk[m], j], rcond=None)[0]
        yp, xp = complex(cy[0], -cy[1]), complex(cx[0], -cx[1])
        meas.append(-yp / (yp + xp))
        used.append(int(m.sum()))
    lp = design_at(prj, loop, scn)
    return LoopGainResult(
        loop,
        fs,
        np.array(meas),
        lp.loop_gain(fs),
        {
            "crossover_Hz": lp.crossover_Hz,
            "phase_margin_deg": lp.phase_margin_deg,
            "gain_margin_dB": lp.gain_margin_dB if math.isfinite(lp.gain_margin_dB) else None,
        },
        scn,
        {"channel": ch.name.lower(), "amplitude": amp, "unit": "A" if ch == Channel.IL else "V"},
        res.wall_s,
        used,
    )
