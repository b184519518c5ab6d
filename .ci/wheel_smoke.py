"""Smoke test of an installed wheel: run in a fresh virtual environment without Rust.

Checks that fockmill is imported from the installed wheel (not from the source tree),
that no Rust toolchain is reachable, and that the README's ten-line example solves.
"""

from __future__ import annotations

import math
import shutil
import sys
from pathlib import Path

import fockmill as fm

source_tree = Path(__file__).resolve().parents[1] / "python"
location = Path(fm.__file__).resolve()
assert source_tree not in location.parents, f"imported from the source tree: {location}"
assert Path(sys.prefix) in location.parents, f"not from this environment: {location}"
assert shutil.which("cargo") is None, "a Rust toolchain is on PATH; the smoke test needs none"
assert shutil.which("rustc") is None, "a Rust toolchain is on PATH; the smoke test needs none"

# The README's ten-line example, verbatim in substance.
L = 8  # a ring of 8 modes, 8 quanta
space = fm.FockSpace(modes=L, cutoff=L, total=L)
H = sum(
    -1.0
    * (fm.raising(i) * fm.lowering((i + 1) % L) + fm.raising((i + 1) % L) * fm.lowering(i))
    + 2.0 * fm.number(i) * (fm.number(i) - 1)
    for i in range(L)
)
matrix = fm.build_matrix(H, space)
levels = fm.lowest_levels(H, space, k=3)
g = fm.ground_state(H, space)
variances = fm.number_variances(space, g.vector)
print(g.energy, levels.gap, variances)

# Size: C(2L - 1, L) states of L quanta in L modes (stars and bars; common practice).
assert space.dim == math.comb(2 * L - 1, L) == matrix.shape[0]
assert g.residual < 1e-6 and levels.gap > 0
# The ground state is translation invariant: all sites fluctuate alike.
assert max(variances) - min(variances) < 1e-6
assert abs(g.energy - levels.energies[0]) < 1e-8
print(f"wheel smoke test passed: fockmill {fm.__version__} from {location.parent}")
