"""A validation from Python, step by step and then whole, on the invented demo survey.

Run it with `python examples/validate_in_python.py`; it writes only example-report/.
"""

import conecheck as cc

cfg = cc.demo_config(quick=True)  # or cc.load_config("my_run.toml")
box = cc.build_box(cfg)  # or cc.galaxy_box(table, box_size=...) for your own catalogue
cones = cc.build_cones(box, cfg, n=3)  # astropy Tables, as `conecheck run` builds them

for statistic in ("number_density", "wp"):
    on_box = cc.measure_box(box, statistic, config=cfg, sample="broad")
    on_cones = [cc.measure_cone(cone, statistic, config=cfg, sample="broad")
                for cone in cones]
    verdict = cc.compare(on_box, on_cones, config=cfg)
    print(f"{statistic:15s} {verdict.verdict:5s} largest |offset| / error "
          f"{verdict.max_abs_z:.2f}")

results, exit_code = cc.validate(cfg)  # every sample, cut and statistic; nothing written
print("whole run:", results["overall"], "- exit code", exit_code)
cc.write_report(results, "example-report", config=cfg)  # results.json, validation.pdf
