"""A diode junction at one temperature: the SPICE level-1 temperature scaling of IS, CJO and VJ,
and the junction's current and charge at a voltage. Plain floats (no numpy), so validating a
network while reading a design stays light."""

from __future__ import annotations

import math

from gapforge.analog.network import K_OVER_Q, ZERO_CELSIUS, DiodeModel
from gapforge.base.records import record

GMIN = 1e-12  # S, across every junction, as circuit simulators do
_REF_K = 300.15  # K, the reference temperature of the junction-potential scaling
_BOLTZMANN = 1.380649e-23
_CHARGE = 1.602176634e-19


@record
class Junction:
    """A diode's temperature-adjusted parameters."""

    sat: float  # A
    vte: float  # N kT/q, V
    rs: float
    cj: float  # F
    vj: float  # V
    m: float
    fc_v: float  # FC * VJ(T)
    f1: float
    f2: float
    f3: float
    bv: float | None
    vcrit: float

    def current(self, vd: float) -> tuple[float, float]:
        """Junction current and conductance (forward, reverse and breakdown regions)."""
        vte = self.vte
        if vd >= -3.0 * vte:
            e = math.exp(min(vd / vte, 700.0))
            i = self.sat * (e - 1.0)
            g = self.sat * e / vte
        elif self.bv is None or vd >= -self.bv:
            a = 3.0 * vte / (vd * math.e)
            a = a * a * a
            i = -self.sat * (1.0 + a)
            g = self.sat * 3.0 * a / vd
        else:
            e = math.exp(min(-(self.bv + vd) / vte, 700.0))
            i = -self.sat * e
            g = self.sat * e / vte
        return i + GMIN * vd, g + GMIN

    def charge(self, vd: float) -> tuple[float, float]:
        """Depletion charge and capacitance (linear extension beyond FC * VJ)."""
        if self.cj == 0.0:
            return 0.0, 0.0
        if vd < self.fc_v:
            arg = 1.0 - vd / self.vj
            s = arg ** (-self.m)
            return self.vj * self.cj * (1.0 - arg * s) / (1.0 - self.m), self.cj * s
        c2 = self.cj / self.f2
        q = self.cj * self.f1 + c2 * (
            self.f3 * (vd - self.fc_v) + self.m / (2.0 * self.vj) * (vd * vd - self.fc_v**2)
        )
        return q, c2 * (self.f3 + self.m * vd / self.vj)


def _gap_term(temp_k: float) -> float:
    egfet = 1.16 - (7.02e-4 * temp_k * temp_k) / (temp_k + 1108.0)
    arg = -egfet / (2.0 * _BOLTZMANN * temp_k) + 1.1150877 / (_BOLTZMANN * 2.0 * _REF_K)
    return -2.0 * (K_OVER_Q * temp_k) * (1.5 * math.log(temp_k / _REF_K) + _CHARGE * arg)


def junction(diode: DiodeModel, temp_c: float) -> Junction:
    """Temperature-adjusted junction parameters (the SPICE level-1 scaling equations)."""
    t = temp_c + ZERO_CELSIUS
    tn = diode.tnom + ZERO_CELSIUS
    vte = diode.n * K_OVER_Q * t
    sat = diode.saturation_current(temp_c)
    # junction potential and capacitance versus temperature (silicon band gap)
    pbo = (diode.vj - _gap_term(tn)) / (tn / _REF_K)
    gma_old = (diode.vj - pbo) / pbo
    cj = diode.cjo / (1.0 + diode.m * (400e-6 * (tn - _REF_K) - gma_old))
    vj = _gap_term(t) + (t / _REF_K) * pbo
    gma_new = (vj - pbo) / pbo
    cj *= 1.0 + diode.m * (400e-6 * (t - _REF_K) - gma_new)
    fc = diode.fc
    if fc * vj > 1.0:
        vj = 1.0 / fc
    xfc = math.log(1.0 - fc)
    f1 = vj * (1.0 - math.exp((1.0 - diode.m) * xfc)) / (1.0 - diode.m)
    f2 = math.exp((1.0 + diode.m) * xfc)
    f3 = 1.0 - fc * (1.0 + diode.m)
    vcrit = vte * math.log(vte / (math.sqrt(2.0) * sat))
    return Junction(sat, vte, diode.rs, cj, vj, diode.m, fc * vj, f1, f2, f3, diode.bv, vcrit)
