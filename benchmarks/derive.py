"""Derivation speed: every configuration of a 12-resistor, 3-switch fixture.

Run by hand (``python benchmarks/derive.py``); the figure goes in the README.
The cold figure is measured in a fresh interpreter, so it includes importing
firstorder and sympy; the cached figure is the same eight derivations asked for
again in that interpreter.  The fixture is a scenario of our own invention: a DAC
channel and a reference routed by relays into a filtered sense node, a divider,
a switched meter input and the leakage paths of the board.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

TARGET_SECONDS = 2.0

_CHILD = textwrap.dedent('''
    import itertools, json, time
    start = time.perf_counter()
    import firstorder as fo

    fx = fo.Fixture()
    fx.voltage_source("vdac", "dac", "gnd")
    fx.voltage_source("vref", "ref", "gnd")
    fx.resistor("r_out", "dac", "n1", "50")
    fx.resistor("r_prot", "n1", "n2", "1k")
    fx.resistor("r_pcb", "n2", "gnd", "10G")
    fx.switch("k_dac", "n2", "bus", r_on="0.2", r_off="1G")
    fx.resistor("r_refs", "ref", "n3", "10k")
    fx.switch("k_ref", "n3", "bus", r_on="0.2", r_off="1G")
    fx.resistor("r_bus_leak", "bus", "gnd", "100M")
    fx.resistor("r_filt", "bus", "flt", "4.7k")
    fx.capacitor("c_filt", "flt", "gnd", "100n")
    fx.resistor("r_guard", "flt", "gnd", "1G")
    fx.resistor("r_top", "flt", "sense", "90k")
    fx.resistor("r_bot", "sense", "gnd", "10k")
    fx.switch("k_meter", "sense", "meter", r_on="0.5")
    fx.resistor("r_meter", "meter", "mlo", "10M")
    fx.resistor("r_lead", "mlo", "lo", "0.1")
    fx.resistor("r_lo", "lo", "gnd", "1")
    fx.probe("v_meter", node="meter")
    fx.probe("i_prot", through="r_prot")
    fx.probe("v_bus", node="bus")
    assert sum(p.kind == "resistor" for p in fx.parts) == 12

    configurations = list(itertools.product([True, False], repeat=3))
    for k_dac, k_ref, k_meter in configurations:
        fx.derivation(k_dac=k_dac, k_ref=k_ref, k_meter=k_meter)
    cold = time.perf_counter() - start
    start = time.perf_counter()
    for k_dac, k_ref, k_meter in configurations:
        fx.derivation(k_dac=k_dac, k_ref=k_ref, k_meter=k_meter)
    cached = time.perf_counter() - start
    print(json.dumps({"cold": cold, "cached": cached, "configurations": len(configurations)}))
''')


def measure() -> dict:
    """Run the child in a fresh interpreter and return its timings."""
    out = subprocess.run([sys.executable, "-c", _CHILD], check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    result = measure()
    verdict = "meets" if result["cold"] < TARGET_SECONDS else "MISSES"
    print(
        f"derive {result['configurations']} configurations of a 12-resistor, 3-switch fixture: "
        f"{result['cold']:.2f} s cold in a fresh interpreter (imports included; target "
        f"< {TARGET_SECONDS:.0f} s, {verdict}), {result['cached'] * 1e3:.2f} ms again from the cache"
    )


if __name__ == "__main__":
    main()
