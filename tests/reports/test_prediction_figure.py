"""The prediction figure as an object: dense-grid band for 1-D inputs, parity plot beyond, residual panel."""

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.figure import Figure

from qgp.classical.kernels import RBF
from qgp.classical.problem import build_problem, problem_from_config
from qgp.config import load_config
from qgp.demo import demo_config_path
from qgp.readout.inference import infer
from qgp.reports.figures import draw_prediction
from qgp.settings import CircuitSettings, ReadoutSettings


def test_one_input_draws_the_exact_band_on_its_own_grid_and_the_residuals():
    problem = problem_from_config(load_config(demo_config_path()))
    result = infer(problem, CircuitSettings(clock_qubits=5), ReadoutSettings(shots=200, seed=1), progress=None)
    fig = draw_prediction(result)
    assert isinstance(fig, Figure) and len(fig.axes) == 2
    main, resid = fig.axes
    labels = [h.get_label() for h in main.get_legend_handles_labels()[0]]
    assert "held-out targets" in labels and "training data" in labels
    mean_line = [ln for ln in main.get_lines() if ln.get_label() == "exact mean"][0]
    assert len(mean_line.get_xdata()) > 5 * problem.n_test  # its own dense grid, not a polyline through test points
    # The exact mean on that grid is the exact GP's own prediction there (R&W Alg. 2.1; numpy reference).
    x, y = mean_line.get_xdata(), mean_line.get_ydata()
    np.testing.assert_allclose(y, problem.exact.predict(x[:, None]).mean, rtol=1e-12)
    assert resid.get_ylabel().startswith("quantum − exact")
    plt.close(fig)


def test_several_inputs_draw_a_parity_plot():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(8, 2))
    y = np.sin(X[:, 0]) + 0.5 * X[:, 1]
    problem = build_problem(X, y, RBF(1.0, 1.5), noise_variance=0.1, X_test=X[:5] + 0.05)
    fig = draw_prediction(infer(problem, CircuitSettings(clock_qubits=5), progress=None))
    main = fig.axes[0]
    assert main.get_xlabel().startswith("exact mean") and main.get_ylabel().startswith("quantum mean")
    plt.close(fig)


def test_labels_with_units_reach_the_axes_and_bad_columns_are_named(tmp_path):
    # The bundled demo config labels its columns ([data] labels).
    from qgp.config import load_dataset
    from qgp.errors import QgpError
    import pytest

    cfg = load_config(demo_config_path())
    problem = problem_from_config(cfg)
    fig = draw_prediction(infer(problem, CircuitSettings(clock_qubits=4), progress=None))
    main, resid = fig.axes
    assert main.get_ylabel() == "ice thickness (cm)" and resid.get_xlabel() == "distance along the transect (m)"
    plt.close(fig)
    text = demo_config_path().read_text().replace('distance_m = "distance', 'distanse_m = "distance')
    path = tmp_path / "cfg.toml"
    path.write_text(text.replace('"ice_train.csv"', f'"{(demo_config_path().parent / "ice_train.csv").as_posix()}"')
                    .replace('"ice_test.csv"', f'"{(demo_config_path().parent / "ice_test.csv").as_posix()}"'))
    with pytest.raises(QgpError, match="labels names column 'distanse_m' \\(did you mean 'distance_m'\\?\\)"):
        load_dataset(load_config(path).data)


def test_importing_the_figures_keeps_a_backend_chosen_before():
    # A notebook or program that picked a matplotlib backend keeps it (draw_* figures can be shown);
    # a bare import (the command, sweeps) gets the display-free Agg. Fresh interpreters, so the
    # test's own imports do not decide.
    import subprocess
    import sys

    chosen = ("import matplotlib; matplotlib.use('svg'); import matplotlib.pyplot; "
              "import qgp.reports.figures; print(matplotlib.get_backend())")
    bare = "import qgp.reports.figures, matplotlib; print(matplotlib.get_backend())"
    out = [subprocess.run([sys.executable, "-c", c], capture_output=True, text=True, check=True).stdout.strip()
           for c in (chosen, bare)]
    assert out == ["svg", "agg"] or out == ["svg", "Agg"], out


def test_held_out_targets_can_be_passed_and_must_match_the_test_points():
    # The estimator's predict never sees targets: draw_prediction takes them (one per test point).
    x = np.linspace(0, 5, 8)
    problem = build_problem(x, np.sin(x), RBF(1.0, 1.0), noise_variance=0.1, X_test=np.array([0.5, 2.5, 4.5]))
    result = infer(problem, CircuitSettings(clock_qubits=4), progress=None)
    fig = draw_prediction(result, y_test=[0.4, 0.6, -0.9])
    held = [ln for ln in fig.axes[0].get_lines() if ln.get_label() == "held-out targets"]
    assert len(held) == 1 and list(held[0].get_ydata()) == [0.4, 0.6, -0.9]
    plt.close(fig)
    import pytest

    from qgp.errors import QgpError

    with pytest.raises(QgpError, match="y_test has 2 values but the result has 3 test points"):
        draw_prediction(result, y_test=[1.0, 2.0])


def test_a_user_style_sheet_goes_on_top_of_qgps_own(tmp_path, monkeypatch):
    import pytest

    import matplotlib as mpl

    from qgp.errors import QgpError
    from qgp.reports.figures import STYLE_FILE, figure_style, use_style
    from qgp.tools.cli import main

    mine = tmp_path / "mine.mplstyle"
    mine.write_text("font.size: 13\nlines.linewidth: 2.5\n")
    with figure_style():
        ours = (mpl.rcParams["font.size"], mpl.rcParams["lines.linewidth"], mpl.rcParams["pdf.fonttype"])
    assert ours == (8.0, 1.2, 42)  # qgp's sheet (qgp/reports/qgp.mplstyle)
    assert STYLE_FILE.is_file()
    use_style(str(mine))
    try:
        with figure_style():
            assert (mpl.rcParams["font.size"], mpl.rcParams["lines.linewidth"], mpl.rcParams["pdf.fonttype"]) == (13.0, 2.5, 42)
    finally:
        use_style()
    monkeypatch.setenv("QGP_MPLSTYLE", str(mine))
    with figure_style():
        assert mpl.rcParams["font.size"] == 13.0
    monkeypatch.delenv("QGP_MPLSTYLE")
    with pytest.raises(QgpError, match="neither a file nor a matplotlib style name"):
        use_style(str(tmp_path / "missing.mplstyle"))
    # The command: --style reaches the figures it draws, and is dropped after it.
    seen = []
    import qgp.reports.figures as figures

    real = figures.figure_style

    def spy():
        seen.append(figures.styles())
        return real()

    monkeypatch.setattr(figures, "figure_style", spy)
    assert main(["--style", str(mine), "run", "--demo", "--out", str(tmp_path / "run"), "--quiet"]) == 0
    assert seen and all(s[-1] == str(mine) for s in seen)
    assert figures.styles() == [str(STYLE_FILE)]


def test_formulas_reach_the_figures_as_mathtext():
    # Common practice (matplotlib's mathtext guide): formulas between $ signs, so κ, σ², e^{iAt} are typeset.
    from hypothesis import given
    from hypothesis import strategies as st

    from qgp.reports.figures import math_label, mathify

    assert math_label("exact e^(iAt), σ² for κ = 20") == r"exact $e^{iAt}$, $\sigma^2$ for $\kappa$ = 20"
    assert math_label(r"κ_b ≤ 22, already $\kappa$") == r"$\kappa_b$ ≤ 22, already $\kappa$"

    @given(st.lists(st.sampled_from(["κ", "σ²", "λ̃", "e^(iAt)", "κ_b", " ", "= 3", "x", "$y$"]), max_size=8))
    def idempotent(parts):
        once = math_label("".join(parts))
        assert math_label(once) == once and once.count("$") % 2 == "".join(parts).count("$") % 2

    idempotent()
    fig, ax = plt.subplots()
    ax.plot([0, 1], [0, 1], label="σ² = 0.5")
    ax.legend()
    ax.set(title="walk, κ = 20", xlabel="eigenvalue λ", ylabel="1/λ̃")
    mathify(fig)
    texts = [ax.get_title(), ax.get_xlabel(), ax.get_ylabel(), ax.get_legend().get_texts()[0].get_text()]
    assert texts == [r"walk, $\kappa$ = 20", r"eigenvalue $\lambda$", r"$1/\tilde\lambda$", r"$\sigma^2$ = 0.5"]
    plt.close(fig)
