"""The analog reference: what an RC-diode-Schmitt dead-time network really delivers.

Owns the network's data model (`network`: values with bands, the SPICE diode model; `junction`:
the diode at a temperature), the parameter table and its reading (`parameters`), the closed forms
(`closed_form`), the diode charge integral (`diode_edge`), the pair's evaluation (`corners`),
tolerance analysis (`tolerance`, its Monte Carlo statistics in `statistics`), transient simulation (`simulate`), preferred values
(`preferred`), the network's findings (`findings`) and its display text (`describe`). Imports
only base. Never imports timer, stage, bench, pipeline, outputs or cli. Inside, the data model stands
below everything that evaluates it: `network` imports no other module of this package, `junction`
only `network`.

One channel: a CMOS driver (supply VDD, output resistance Rout, propagation delay) drives a
resistor R bridged by a fast diode into a capacitor C (plus the Schmitt input capacitance Cin and a
stray term); a Schmitt-trigger buffer (thresholds VT+ and VT-, propagation delay) reads the node;
an optional output inverter follows. A complementary pair is two such channels, the low one
behind an inverter, with independent parts (channel mismatch).

The edge model. Without a diode both edges are the textbook single-time-constant form
    t = (R + Rout)(C + Cin + Cstray) ln(|Vfinal - Vstart| / |Vfinal - Vth|).
With one, both edges come from the charge integral (`diode_edge_delay`): the diode's own SPICE
law (forward on the bypassed edge, leakage on the other) and its junction charge, integrated
over the node voltage by Gauss-Legendre quadrature, with no time-stepping. Why not the textbook
two-slope form on the bypassed edge (fast through Rout + RS until within the diode's knee of the
final value, then through R)? It treats the diode as a switch, but a real diode's current falls
exponentially as the node approaches the knee, so the form underestimates the bypassed edge
(2.51 ns against 4.26 ns simulated for 4.7k / 100p, 1.28 against 2.23 ns in the gan-buck
example), and the dead time of the pair - one channel's slow edge minus the other's bypassed
edge - comes out too long: the unsafe direction. The charge integral matches the transient and
ngspice within 0.01 % without junction capacitance; with it the bypassed edge is bounded from
above (slow by up to tens of % when the junction capacitance is comparable to C) and the resistor
edge from below (within 1.5 % on the recorded grid: its end points use the circuit's slow
manifold, see `diode_edge_delay`), so both errors shorten the dead time; tests hold both bounds
against ngspice on a recorded grid and a seeded random family. It is vectorised like the closed form, so the corners, their finer-grid check and the Monte Carlo use it
directly (about 10 us per sample for both edges of both channels: `gapforge build` keeps to
0.5 s); the transient itself (simulate.py, milliseconds per edge) would not fit there. The
textbook forms stay available (`channel_edge_delays(textbook=True)`) for display only.
tests/test_analog_model.py holds the model to ngspice's recorded results and checks, over a
grid of networks (1.8 / 3.3 / 5 V, small and large R and C, both orientations, 27 and 125 C),
that the dead-time range always contains the simulated one. `gapforge analog --simulate` warns
loudly when model and simulation still differ by more than --model-warn on any edge.

`reference_findings` gives the one-line warnings every output built from the network repeats
(`analog` prints the same lines and exits 1 on the first two): a dead time whose worst-case
minimum is <= 0 (the network itself can shoot through), diode leakage taking more than a share
of a slow edge at the hottest temperature (`slow_edge_leakage`: the charge integral with and
without the leakage, typical parts, a few milliseconds; it agrees with the transient within 1 %),
and a bypassed edge whose threshold lies inside the diode's knee.

Every parameter is a `Band` (min/typ/max); the same table of parameters (`PARAMETERS`) feeds the
design file's `[reference]` section and the `gapforge analog` options, so they cannot drift apart.
numpy is imported only inside the functions that evaluate arrays.

Contributor rules: frozen dataclasses for values, no global mutable state, floats only for
physics; the ranges handed to the fit are Fractions rounded to the safe side.
"""

