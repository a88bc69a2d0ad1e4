"""The README's Python example runs as written, and its numbers make sense."""

import re
from pathlib import Path

import numpy as np


def test_readme_python_example_runs(capsys):
    text = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert len(blocks) == 1, "the README should hold exactly one Python example"
    namespace: dict = {}
    exec(compile(blocks[0], "README.md", "exec"), namespace)
    result = namespace["result"]
    # The circuits' mean agrees with the exact GP to within a few standard errors plus the
    # phase-estimation error the error budget reports (c = 6): a sanity bound, not a target.
    bound = 5 * result.mean_quantum_se + result.error_budget["stages"]["oracle"]["mean_max_abs_error"]
    assert np.all(np.abs(result.mean_quantum - result.mean_exact) <= bound)
    assert "\n" in capsys.readouterr().out
