"""Target writers shared by the fused-likelihood tests (tests/model): several companions with
two instruments, optional absolute frame and central-body rows, and the true values of their
sampled variables."""

from __future__ import annotations

import textwrap

import numpy as np

from orbitmass.demo.simulate import simulate, write_positions_csv, write_velocities_csv

__all__ = ["write_system", "truth_values"]


def write_system(folder, stars, *, rng, absolute=False, central_rows=False, shared_epochs=False, extra=""):
    """Write a target with ``stars`` [(name, TrueOrbit)]; two instruments, the second with an offset."""
    folder.mkdir(parents=True, exist_ok=True)
    blocks = []
    for k, (name, orbit) in enumerate(stars):
        t = np.sort(rng.uniform(2002, 2026, 14 + k))
        s = simulate(orbit, t)
        write_positions_csv(folder / f"{name}_pos.csv", t, s["east_mas"] + rng.normal(0, 0.4, t.size),
                            s["north_mas"] + rng.normal(0, 0.4, t.size), 0.4)
        tv = t.copy() if shared_epochs else np.sort(rng.uniform(2004, 2026, 9 + k))
        sv = simulate(orbit, tv)
        inst = np.where(np.arange(tv.size) % 2 == 0, "spec-a", "spec-b")
        body = np.where((np.arange(tv.size) % 3 == 0) & central_rows & (k == 0), "central", "companion")
        rv = np.where(body == "central", sv["rv_central_kms"], sv["rv_companion_kms"])
        rv = rv + np.where(inst == "spec-b", 7.0, 0.0) + rng.normal(0, 5.0, tv.size)
        write_velocities_csv(folder / f"{name}_rv.csv", tv, rv, 5.0, instrument=inst, body=body)
        blocks.append(f'[[companion]]\nname = "{name}"\nastrometry = "{name}_pos.csv"\n'
                      f'velocities = "{name}_rv.csv"\n'
                      'period = { dist = "log-uniform", low = "1 yr", high = "100 yr" }\n')
    frame = textwrap.dedent("""\
        frame = "absolute"
        x0 = { dist = "normal", mean = "0 mas", sd = "5 mas" }
        y0 = { dist = "normal", mean = "0 mas", sd = "5 mas" }
        vx0 = { dist = "normal", mean = "0 mas / yr", sd = "1 mas / yr" }
        vy0 = { dist = "normal", mean = "0 mas / yr", sd = "1 mas / yr" }
        vz0 = { dist = "normal", mean = "0 km / s", sd = "50 km / s" }
        """) if absolute else 'systemic = { dist = "uniform", low = "-100 km / s", high = "100 km / s" }\n'
    head = ("[target]\nname = \"invented test system\"\nreference_epoch = 2014.0\n[central]\n"
            'mass = { dist = "log-uniform", low = "0.5 solMass", high = "1e8 solMass" }\n' + frame
            + '[distance]\nprior = { dist = "uniform", low = "5 pc", high = "20000 pc" }\n'
            "[instruments.spec-a]\n"
            'jitter = { dist = "uniform", low = "0 km / s", high = "20 km / s" }\n'
            "[instruments.spec-b]\n"
            'offset = { dist = "normal", mean = "0 km / s", sd = "30 km / s" }\n' + extra)
    path = folder / "target.toml"
    path.write_text(head + "\n".join(blocks), encoding="utf-8")
    return path



def truth_values(space, stars):
    v = {"mass_msun": 2.6, "distance_pc": 30.0, "systemic": 0.0, "vz0": 0.0, "x0": 0.0, "y0": 0.0,
         "vx0": 0.0, "vy0": 0.0, "offset.spec-a": 0.0, "offset.spec-b": 7.0, "jitter.spec-a": 2.0,
         "jitter.spec-b": 0.0}
    for name, o in stars:
        v[f"{name}.period_yr"] = o.period_yr
        v[f"{name}.ecc"] = o.eccentricity
        v[f"{name}.omega"] = np.radians(o.arg_periastron_deg)
        v[f"{name}.node"] = np.radians(o.ascending_node_deg)
        v[f"{name}.cos_i"] = np.cos(np.radians(o.inclination_deg))
        v[f"{name}.m0"] = 2 * np.pi * (space.t_ref - o.periastron_time) / o.period_yr
        v[f"{name}.q"] = 0.6
    return v
