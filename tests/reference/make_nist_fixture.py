"""Build tests/reference/nist_strd.json from the NIST StRD linear least squares files.

Usage: python tests/reference/make_nist_fixture.py [DAT_DIR]

DAT_DIR defaults to ../shared/reference-data/nist-strd-lls relative to the repo root.
Each .dat file holds a header, the certified regression statistics, the certified
ANOVA table and the data rows. Numbers are read with float() from the text exactly as
printed; every count the header states (parameters, observations, data line range) is
checked against what was parsed. Standard library only.
"""

import json
import re
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO_ROOT = HERE.parents[1]
DEFAULT_DIR = REPO_ROOT / ".." / "shared" / "reference-data" / "nist-strd-lls"
OUTPUT = HERE / "nist_strd.json"
SOURCE = ("NIST StRD, Linear Least Squares Regression, "
          "https://www.itl.nist.gov/div898/strd/lls/lls.shtml (public domain)")

# Expected (model, degree, intercept) per dataset, in NIST's order; used to check the parse.
EXPECTED = {
    "Norris": ("polynomial", 1, True),
    "Pontius": ("polynomial", 2, True),
    "NoInt1": ("polynomial", 1, False),
    "NoInt2": ("polynomial", 1, False),
    "Filip": ("polynomial", 10, True),
    "Longley": ("multilinear", None, True),
    "Wampler1": ("polynomial", 5, True),
    "Wampler2": ("polynomial", 5, True),
    "Wampler3": ("polynomial", 5, True),
    "Wampler4": ("polynomial", 5, True),
    "Wampler5": ("polynomial", 5, True),
}

NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[Ee][-+]?\d+)?"
NUM = f"({NUMBER})"


def search(pattern, text, what):
    match = re.search(pattern, text, re.MULTILINE)
    if match is None:
        raise ValueError(f"could not find {what}")
    return match


def parse_dat(path):
    """Parse one StRD .dat file into a fixture entry."""
    lines = path.read_text(encoding="ascii").splitlines()
    text = "\n".join(lines)

    first, last = map(int, search(r"Data\s+\(lines (\d+) to (\d+)\)", text, "data range").groups())
    c_first, c_last = map(int, search(r"Certified Values\s+\(lines (\d+) to (\d+)\)",
                                      text, "certified range").groups())
    n_params = int(search(r"^\s+(\d+) Parameters? \(", text, "parameter count").group(1))
    n_predictors = int(search(r"^\s+(\d+) Predictor Variables?", text, "predictor count").group(1))
    n_obs = int(search(r"^\s+(\d+) Observations", text, "observation count").group(1))

    cert = "\n".join(lines[c_first - 1:c_last])
    params = re.findall(rf"^\s+B(\d+)\s+{NUM}\s+{NUM}\s*$", cert, re.MULTILINE)
    if len(params) != n_params:
        raise ValueError(f"header says {n_params} parameters, found {len(params)}")
    indices = [int(i) for i, _, _ in params]
    intercept = indices[0] == 0
    if indices != list(range(indices[0], indices[0] + n_params)):
        raise ValueError(f"parameters out of order: {indices}")

    residual_sd = float(search(rf"^\s+Standard Deviation\s+{NUM}\s*$",
                               cert, "residual SD").group(1))
    r_squared = float(search(rf"^\s+R-Squared\s+{NUM}\s*$", cert, "R-squared").group(1))
    reg = search(rf"^Regression\s+(\d+)\s+{NUM}\s+{NUM}\s+({NUMBER}|Infinity)\s*$",
                 cert, "ANOVA regression row").groups()
    res = search(rf"^Residual\s+(\d+)\s+{NUM}\s+{NUM}\s*$", cert, "ANOVA residual row").groups()
    if int(reg[0]) + int(res[0]) != n_obs - (1 if intercept else 0):
        raise ValueError("ANOVA degrees of freedom do not add up")

    rows = [[float(v) for v in line.split()] for line in lines[first - 1:last]]
    if len(rows) != n_obs or len(rows) != last - first + 1:
        raise ValueError(f"header says {n_obs} observations, read {len(rows)}")
    if any(len(row) != 1 + n_predictors for row in rows):
        raise ValueError("data row with the wrong number of columns")

    entry = {"model": "multilinear" if n_predictors > 1 else "polynomial"}
    if n_predictors == 1:
        entry["degree"] = n_params - 1 if intercept else n_params
    entry["intercept"] = intercept
    entry["x"] = [row[1:] for row in rows]
    entry["y"] = [row[0] for row in rows]
    entry["certified"] = {
        "estimates": [float(est) for _, est, _ in params],
        "standard_errors": [float(se) for _, _, se in params],
        "residual_sd": residual_sd,
        "r_squared": r_squared,
        "regression_df": int(reg[0]),
        "residual_df": int(res[0]),
        "regression_ss": float(reg[1]),
        "residual_ss": float(res[1]),
        "f_statistic": None if reg[3] == "Infinity" else float(reg[3]),
    }
    return entry


def to_json(obj, level=0):
    """JSON text with one data row (or one flat list) per line, so diffs stay readable."""
    pad, inner = "  " * level, "  " * (level + 1)
    if isinstance(obj, dict):
        items = [f"{inner}{json.dumps(k)}: {to_json(v, level + 1)}" for k, v in obj.items()]
        return "{\n" + ",\n".join(items) + "\n" + pad + "}"
    if isinstance(obj, list) and obj and isinstance(obj[0], list):
        return "[\n" + ",\n".join(inner + json.dumps(row) for row in obj) + "\n" + pad + "]"
    return json.dumps(obj)


def main(argv):
    dat_dir = Path(argv[1]) if len(argv) > 1 else DEFAULT_DIR
    datasets = {}
    for name, (model, degree, intercept) in EXPECTED.items():
        entry = parse_dat(dat_dir / f"{name}.dat")
        got = (entry["model"], entry.get("degree"), entry["intercept"])
        if got != (model, degree, intercept):
            raise ValueError(f"{name}: parsed model {got}, expected {(model, degree, intercept)}")
        datasets[name] = entry
        c = entry["certified"]
        print(f"{name:9s} n={len(entry['y']):3d} p={len(c['estimates']):2d} {model:11s} "
              f"B[0]={c['estimates'][0]!r} se[0]={c['standard_errors'][0]!r} "
              f"R2={c['r_squared']!r} F={c['f_statistic']!r}")
    OUTPUT.write_text(to_json({"source": SOURCE, "datasets": datasets}) + "\n",
                      encoding="ascii")
    print(f"wrote {OUTPUT.relative_to(REPO_ROOT)}")


if __name__ == "__main__":
    main(sys.argv)
