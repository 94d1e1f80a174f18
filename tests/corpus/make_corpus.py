"""Regenerate the regression corpus of bad inputs (issue 14 and 16 cases) in this folder.

Run from the repository root: ``python tests/corpus/make_corpus.py``.  Every file is derived from
the first 600 s of the bundled demo day ``c48_day_lunch`` (1 s samples, with steps, regeneration
and a SOC reference) and the demo truth cell at 25 degC; ``cases.json`` lists, for each file,
the command line, the expected exit code and a text the one-line message must hold.  (A CSV
field over 128 KiB is built by the test itself, to keep the corpus small.)
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


def main() -> None:
    from socfuse.estimator.demo.truth import truth_cell_model
    from socfuse.models.loaders import load_recording
    from socfuse.models.modelfile import model_to_dict, save_model

    rec = load_recording(HERE.parents[1] / "datasets" / "c48_day_lunch.csv").slice(0, 600)
    model = truth_cell_model(25.0)
    save_model(model, HERE / "model.json")
    t, i, v, soc = rec.time_s, rec.current_a, rec.voltage_v, rec.soc_ref

    def write(name, cols, fmt=None, tail=""):
        names = list(cols)
        fmt = fmt or {}
        lines = [",".join(names)]
        for k in range(len(t)):
            lines.append(",".join(fmt.get(n, "{:.6g}").format(cols[n][k]) for n in names))
        (HERE / name).write_text("\n".join(lines) + "\n" + tail)

    base = {"time_s": t, "current_a": i, "voltage_v": v, "soc_ref": soc}
    write("good.csv", base)
    write("current_ma_as_a.csv", {**base, "current_a": i * 1000})
    write("voltage_mv_as_v.csv", {**base, "voltage_v": v * 1000})
    write("pack_4s_voltage.csv", {**base, "voltage_v": v * 4})  # about 13.7..16.8 V for a cell model
    write("soc_ref_percent.csv", {**base, "soc_ref": soc * 100})
    write("sign_flipped.csv", {**base, "current_a": -i})
    spikes = i.copy()
    spikes[[100, 250, 400]] = 1e6
    write("three_spikes_1e6_a.csv", {**base, "current_a": spikes})
    text = (HERE / "good.csv").read_text().splitlines()
    row = text[11].split(",")
    text[11] = ",".join(row[:2] + ["1e308"] + row[3:])
    (HERE / "voltage_1e308.csv").write_text("\n".join(text) + "\n")
    text = (HERE / "good.csv").read_text().splitlines()
    row = text[21].split(",")
    text[21] = ",".join(row[:2] + ["\u0663.9"] + row[3:])  # U+0663 ARABIC-INDIC DIGIT THREE
    (HERE / "unicode_digits.csv").write_text("\n".join(text) + "\n", encoding="utf-8")
    text = (HERE / "good.csv").read_text()
    (HERE / "truncated_last_line.csv").write_text(text.rstrip("\n") [:-9])  # cut inside the last row
    blank = (HERE / "good.csv").read_text().splitlines()
    for k in (30, 31, 200):
        r = blank[k].split(",")
        blank[k] = ",".join(r[:2] + [""] + r[3:])
    (HERE / "blank_voltage_cells.csv").write_text("\n".join(blank) + "\n")

    d = model_to_dict(model)
    (HERE / "model_not_utf8.json").write_bytes(json.dumps(d).replace('"name": "', '"name": "\xe9', 1)
                                               .encode("latin-1"))
    big = json.dumps({**d, "capacity_ah": 0}).replace('"capacity_ah": 0', '"capacity_ah": ' + "9" * 400)
    (HERE / "model_400_digit_int.json").write_text(big)
    (HERE / "model_1e300.json").write_text(json.dumps({**d, "capacity_ah": 1e300}))
    (HERE / "model_null.json").write_text(json.dumps({**d, "capacity_ah": None}))
    (HERE / "model_deep.json").write_text(json.dumps({**d, "provenance": {"x": "[" * 5000 + "]" * 5000}})
                                          .replace('"[' + "[" * 4999, "[" * 5000).replace("]" * 5000 + '"',
                                                                                           "]" * 5000))
    (HERE / "filter_not_utf8.json").write_bytes(b'{"schema": "socfuse.filter/1", "\xff": 1}')
    (HERE / "filter_1e300.json").write_text(json.dumps({"schema": "socfuse.filter/1", "voltage_noise_v": 1e300}))

    est = ["estimate", "--model", "{dir}/model.json", "{dir}/{file}"]
    cases = [
        ("good.csv", est, 0, ""),
        ("current_ma_as_a.csv", est, 2, "--current-unit mA"),
        ("voltage_mv_as_v.csv", est, 2, "--voltage-unit mV"),
        ("pack_4s_voltage.csv", est, 2, "--series-cells 4"),
        ("soc_ref_percent.csv", est, 2, "--soc-ref-unit percent"),
        ("sign_flipped.csv", est, 2, "--discharge-negative"),
        ("three_spikes_1e6_a.csv", est, 2, "3 current spike(s)"),
        ("voltage_1e308.csv", est, 2, "1e+308"),
        ("unicode_digits.csv", est, 2, "ASCII"),
        ("truncated_last_line.csv", est, 0, ""),
        ("blank_voltage_cells.csv", est, 0, ""),
        ("three_spikes_1e6_a.csv", ["check", "{dir}/{file}"], 2, "not a unit or sign error"),
        ("model_not_utf8.json", ["estimate", "--model", "{dir}/{file}", "{dir}/good.csv"], 2, "not UTF-8"),
        ("model_400_digit_int.json", ["estimate", "--model", "{dir}/{file}", "{dir}/good.csv"], 2, "400 digits"),
        ("model_1e300.json", ["estimate", "--model", "{dir}/{file}", "{dir}/good.csv"], 2, "1e+300"),
        ("model_null.json", ["estimate", "--model", "{dir}/{file}", "{dir}/good.csv"], 2, "model_null.json"),
        ("model_deep.json", ["estimate", "--model", "{dir}/{file}", "{dir}/good.csv"], 2, "nested deeper"),
        ("filter_not_utf8.json", ["estimate", "--model", "{dir}/model.json", "--filter", "{dir}/{file}",
                                  "{dir}/good.csv"], 2, "not UTF-8"),
        ("filter_1e300.json", ["estimate", "--model", "{dir}/model.json", "--filter", "{dir}/{file}",
                               "{dir}/good.csv"], 2, "1e+300"),
    ]
    (HERE / "cases.json").write_text(json.dumps([dict(file=f, argv=a, exit=e, says=s) for f, a, e, s in cases],
                                                indent=1) + "\n")
    _ = np


if __name__ == "__main__":
    main()
