"""Plan an observation: would 200 ks of a SIMULATED setup separate gas
from dust at the Si K edge, with the grain size known and with it free?

Run:  python examples/plan_observation.py [--quick] [-o OUT]
(--quick: 6 simulated fits instead of 60).
"""
import argparse

from edgefit.analysis.plan import plan_observation, write_plan
from edgefit.analysis.simulate import simulation_from_dict


def setup(size_free):
    amax = ({"value": 0.25, "min": 0.05, "max": 2.0} if size_free
            else {"value": 0.25, "fixed": True})
    return simulation_from_dict({
        "sightline": {"name": "Planning example (simulated)"},
        "simulate": {"exposure": 2.0e5, "band": [1.7, 2.05], "energy_step": 0.001,
                     "background_rate": 1e-4},
        "model": {"absorbers": ["ism", "gas_si", "dust"], "emission": ["continuum"],
                  "components": {
                      "ism": {"type": "smooth_ism", "options": {"exclude": ["Si"]},
                              "params": {"nh": {"value": 2.0, "fixed": True}}},
                      "gas_si": {"type": "gas_edge", "options": {"element": "Si"},
                                 "params": {"col": {"value": 10.0, "min": 0.0}}},
                      "dust": {"type": "dust_edge",
                               "options": {"material": "olivine", "element": "Si"},
                               "params": {"col": {"value": 27.0, "min": 0.0}, "amax": amax,
                                          "amin": {"value": 0.005, "fixed": True},
                                          "index": {"value": 3.5, "fixed": True}}},
                      "continuum": {"type": "photon_power_law", "options": {"pivot": 1.85},
                                    "params": {"index": {"value": 1.9, "min": 0.5, "max": 4},
                                               "norm": {"value": 3.0, "min": 0.01}}}}}})


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="few simulated fits")
    ap.add_argument("-o", "--output", default="plan_example")
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args(argv)
    n = 6 if args.quick else 60
    for size_free in (False, True):
        plan = plan_observation(setup(size_free), n_sims=n, seed=1, workers=args.workers)
        label = "size free" if size_free else "size known"
        folder = write_plan(plan, f"{args.output}/{label.replace(' ', '_')}")
        print(f"--- {label} ---")
        print(plan.summary())
        print(f"(tables in {folder}/)\n")


if __name__ == "__main__":
    main()
