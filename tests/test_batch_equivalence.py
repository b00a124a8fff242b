"""The batch gives, for each of a few hundred characteristics, the numbers of the one-at-a-time
route, with the default options (500 bootstrap resamples for the fitted non-normal models).

Reference: the one-characteristic route of this package (``analyze_characteristic`` with the
same specification, then ``studykit.batch.result_row``), the route ``studykit analyze -c NAME``
runs. The data are an invented, seeded test fixture (normal columns and shifted Weibull and
lognormal ones), not a reference value: what is checked is that both routes agree exactly.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest

from studykit.analysis import analyze_characteristic
from studykit.batch import result_row
from studykit.cli import main
from studykit.cli.batch import one_blas_thread
from studykit.data import read_measurements
from studykit.study import read_specs

K, N = 200, 125


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("wide")
    rng = np.random.default_rng(14)
    cols, specs = [], []
    for j in range(K):
        if j % 10 == 3:
            x = 10.0 + rng.weibull(1.6, N) * 3.0
            specs.append(f"c{j:03d},,{float(np.quantile(x, 0.5) * 3.0):.4f}")
        elif j % 10 == 7:
            x = 10.0 + rng.lognormal(0.0, 0.5, N)
            specs.append(f"c{j:03d},,{float(np.quantile(x, 0.5) * 3.0):.4f}")
        else:
            mean, sd = rng.uniform(5, 50), rng.uniform(0.01, 0.5)
            x = rng.normal(mean, sd, N)
            specs.append(f"c{j:03d},{mean - 4 * sd:.5f},{mean + 4 * sd:.5f}")
        cols.append(x)
    data = folder / "wide.csv"
    with data.open("w", encoding="utf-8") as f:
        f.write(",".join(f"c{j:03d} [mm]" for j in range(K)) + "\n")
        np.savetxt(f, np.column_stack(cols), delimiter=",", fmt="%.6g")
    spec_path = folder / "specs.csv"
    spec_path.write_text("characteristic,lsl,usl\n" + "\n".join(specs) + "\n", encoding="utf-8")
    return data, spec_path


def test_batch_json_equals_one_at_a_time(files, capsys):
    data, spec_path = files
    assert (
        main(["analyze", str(data), "--all", "--specs", str(spec_path), "--json", "--jobs", "2"])
        == 0
    )
    batch = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    assert len(batch) == K
    m = read_measurements(data)
    chars, crit = read_specs(spec_path)
    spec = {c.name: c for c in chars}
    models = set()
    for got in batch:
        name = got["characteristic"]
        res = analyze_characteristic(m.get(name), spec[name], criteria=crit.get(name))
        want = json.loads(json.dumps(result_row(res), allow_nan=False))
        assert got == want, name
        assert got["error"] is None and got["estimate"] is not None
        models.add(got["model"])
    # the check covers fitted families with their bootstrap, not only the normal model
    assert "normal" in models and len(models) >= 3, models


def test_one_blas_thread_keeps_the_quadrature_bit_identical():
    # the batch runs with one BLAS thread; the eigenvalue problem behind the Gauss-Legendre
    # rule of d3 must give the same bits as numpy's default (reference: numpy's leggauss
    # outside the context)
    def digest(k):
        nodes, weights = np.polynomial.legendre.leggauss(k)
        return hashlib.sha256(nodes.tobytes() + weights.tobytes()).hexdigest()

    free = [digest(k) for k in (200, 256, 400)]
    with one_blas_thread():
        limited = [digest(k) for k in (200, 256, 400)]
    assert limited == free
