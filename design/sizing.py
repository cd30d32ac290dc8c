"""Power-stage sizing of a totem-pole PFC from its ratings.

Input is any object with the ``[spec]`` attributes (``vin_rms_min``, ``vout``,
``power``, ..., ``vout_min_holdup`` filled in as ``design.config`` does).  Output is
a :class:`Sizing` of plain numbers, SI units in every name, and
:meth:`Sizing.rows` gives each figure with the formula and its source.

Relations used (sources named in ``rows``):
  * input current at low line, full power: ``I_rms = P/(eta V_min)``, ``I_pk = sqrt(2) I_rms``;
  * boost CCM ripple ``di_pp = v (1 - v/V_o)/(L f_sw)``, largest at ``v = V_o/2``, so
    ``L = V_o/(4 f_sw di_pp)`` (Erickson & Maksimovic, Fundamentals of Power
    Electronics, boost converter in CCM, ch. 2);
  * twice-line bus ripple ``dv_pp = P/(2 pi f_line C V_o)`` and hold-up
    ``C >= 2 P t_h/(V_o^2 - V_min,h^2)`` (energy balance);
  * switch and capacitor rms currents from the averaged boost duty
    ``d = 1 - |v|/V_o`` with sinusoidal line current (derived in the docstring of
    :func:`size`; the capacitor result matches the ideal-rectifier chapters of
    Erickson & Maksimovic, quoted from memory).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

SRC_EM_BOOST = "Erickson & Maksimovic, Fundamentals of Power Electronics, ch. 2 (boost CCM ripple)"
SRC_EM_RECT = (
    "Erickson & Maksimovic, Fundamentals of Power Electronics, ideal-rectifier chapters "
    "(from memory)"
)
SRC_ENERGY = "energy balance on the bus capacitor"
SRC_POWER = "power balance, sinusoidal line current at unity PF"


@dataclass(frozen=True)
class Sizing:
    """Sized power stage at minimum line and full power (SI units in names)."""

    il_rms_A: float
    iline_peak_A: float
    ripple_pp_A: float
    inductance_H: float
    il_peak_A: float
    ripple_at_vmin_peak_A: float
    ripple_worst_A: float
    capacitance_ripple_F: float
    capacitance_holdup_F: float
    capacitance_F: float
    bus_ripple_pp_V: float
    duty_min: float
    duty_max: float
    fast_switch_rms_A: float
    boost_role_rms_A: float
    slow_switch_rms_A: float
    switch_voltage_V: float
    cap_ripple_rms_A: float
    output_current_A: float

    def as_dict(self) -> dict[str, float]:
        return asdict(self)

    def rows(self) -> list[tuple[str, float, str, str, str]]:
        """(key, value, unit, formula, source) for a report table."""
        info = {
            "il_rms_A": ("A", "P/(eta Vmin)", SRC_POWER),
            "iline_peak_A": ("A", "sqrt(2) I_rms", SRC_POWER),
            "ripple_pp_A": ("A", "ripple_current x I_pk", "spec target"),
            "inductance_H": ("H", "Vo/(4 fsw di_pp)", SRC_EM_BOOST),
            "il_peak_A": ("A", "I_pk + di(v_pk)/2 at Vmin", SRC_EM_BOOST),
            "ripple_at_vmin_peak_A": ("A", "v(1-v/Vo)/(L fsw), v = sqrt(2) Vmin", SRC_EM_BOOST),
            "ripple_worst_A": ("A", "max over 0..sqrt(2)Vmax of v(1-v/Vo)/(L fsw)", SRC_EM_BOOST),
            "capacitance_ripple_F": ("F", "P/(2 pi f_line Vo dv_pp)", SRC_ENERGY),
            "capacitance_holdup_F": ("F", "2 P t_h/(Vo^2 - Vmin_h^2)", SRC_ENERGY),
            "capacitance_F": ("F", "max(ripple, hold-up)", "sizing rule"),
            "bus_ripple_pp_V": ("V", "P/(2 pi f_line C Vo)", SRC_ENERGY),
            "duty_min": ("1", "1 - sqrt(2) Vmax/Vo", SRC_EM_BOOST),
            "duty_max": ("1", "1 - 0/Vo (at the zero crossing)", SRC_EM_BOOST),
            "fast_switch_rms_A": ("A", "I_pk/2 (each fast switch over a line cycle)", SRC_EM_RECT),
            "boost_role_rms_A": (
                "A",
                "I_pk sqrt(1/4 - 2 Vm/(3 pi Vo)) over a line cycle",
                SRC_EM_RECT,
            ),
            "slow_switch_rms_A": ("A", "I_pk/2 (each slow switch, one half cycle)", SRC_POWER),
            "switch_voltage_V": ("V", "Vo + dv_pp/2", SRC_EM_BOOST),
            "cap_ripple_rms_A": ("A", "sqrt(16 Pin^2/(3 pi Vm Vo) - Io^2)", SRC_EM_RECT),
            "output_current_A": ("A", "P/Vo", SRC_POWER),
        }
        return [(k, v, *info[k]) for k, v in self.as_dict().items()]


def boost_ripple_pp(v_in: float, vout: float, inductance: float, fsw: float) -> float:
    """Inductor ripple pk-pk (A) of a CCM boost at input ``v_in`` (V): v(1 - v/Vo)/(L fsw)."""
    v = abs(v_in)
    return v * (1.0 - v / vout) / (inductance * fsw)


def size(spec: Any, inductance: float | None = None, capacitance: float | None = None) -> Sizing:
    """Size the stage; ``inductance``/``capacitance`` (H, F) override the rules.

    Switch rms currents, with ``i = I_pk |sin t|`` and ``d = 1 - Vm |sin t|/Vo``:
    over a half cycle ``<i^2 d> = I_pk^2 (1/2 - 4 Vm/(3 pi Vo))`` and
    ``<i^2 (1-d)> = I_pk^2 4 Vm/(3 pi Vo)``.  Each fast switch is main in one half
    and synchronous in the other, so its rms over a line cycle is ``I_pk/2``;
    each slow switch carries the whole current for one half, also ``I_pk/2``.
    The bus capacitor takes ``i (1-d)`` minus the DC load current.
    """
    vmin, vmax, vo = spec.vin_rms_min, spec.vin_rms_max, spec.vout
    p, eta, fsw, fl = spec.power, spec.efficiency, spec.fsw, spec.line_freq
    p_in = p / eta
    i_rms = p_in / vmin
    i_pk = math.sqrt(2.0) * i_rms
    di = spec.ripple_current * i_pk
    L = vo / (4.0 * fsw * di) if inductance is None else inductance
    vm = math.sqrt(2.0) * vmin
    ripple_pk = boost_ripple_pp(vm, vo, L, fsw)
    v_worst = min(vo / 2.0, math.sqrt(2.0) * vmax)
    dv_pp = spec.ripple_voltage_pp * vo
    c_rip = p / (2.0 * math.pi * fl * vo * dv_pp)
    vh = spec.vout_min_holdup
    c_hold = 2.0 * p * spec.holdup_time / (vo**2 - vh**2)
    C = max(c_rip, c_hold) if capacitance is None else capacitance
    k = 4.0 * vm / (3.0 * math.pi * vo)
    io = p / vo
    return Sizing(
        il_rms_A=i_rms,
        iline_peak_A=i_pk,
        ripple_pp_A=di,
        inductance_H=L,
        il_peak_A=i_pk + ripple_pk / 2.0,
        ripple_at_vmin_peak_A=ripple_pk,
        ripple_worst_A=boost_ripple_pp(v_worst, vo, L, fsw),
        capacitance_ripple_F=c_rip,
        capacitance_holdup_F=c_hold,
        capacitance_F=C,
        bus_ripple_pp_V=p / (2.0 * math.pi * fl * C * vo),
        duty_min=1.0 - math.sqrt(2.0) * vmax / vo,
        duty_max=1.0,
        fast_switch_rms_A=i_pk / 2.0,
        boost_role_rms_A=i_pk * math.sqrt(max(0.0, 0.5 * (0.5 - k))),
        slow_switch_rms_A=i_pk / 2.0,
        switch_voltage_V=vo + p / (2.0 * math.pi * fl * C * vo) / 2.0,
        cap_ripple_rms_A=math.sqrt(max(0.0, i_pk**2 * k - io**2)),
        output_current_A=io,
    )
