"""Demo: a ring of coupled microwave resonators with a Kerr nonlinearity.

INVENTED SCENARIO, for demonstration only: a chip ("Loop-10") carrying ten identical
superconducting resonators on a ring, each coupled to its neighbours with hopping
J/2π = 8 MHz and carrying a self-Kerr shift U/2π = 20 MHz (all values invented).
Energies are in MHz (frequencies over 2π), measured from the bare resonator frequency:

    H = −J Σ_i (a_i† a_{i+1} + h.c.) + (U/2) Σ_i n_i (n_i − 1)

Photon number is conserved, so each number of photons is its own sector.
"""

from __future__ import annotations

import time

import fockmill as fm
import numpy as np

SITES = 10
HOPPING_MHZ = 8.0
KERR_MHZ = 20.0


def ring_hamiltonian(sites: int, hopping: float, kerr: float) -> fm.LadderExpr:
    """The Kerr ring, written with ladder operators."""
    h = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        h = h - hopping * (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        h = h + 0.5 * kerr * fm.number(i) * (fm.number(i) - 1)
    return h


def main() -> None:
    h = ring_hamiltonian(SITES, HOPPING_MHZ, KERR_MHZ)
    print(f"fockmill {fm.__version__}: invented 'Loop-10' resonator ring")
    print(f"{SITES} resonators, J = {HOPPING_MHZ} MHz, U = {KERR_MHZ} MHz (invented values)\n")
    print(
        f"{'photons':>7} {'states':>9} {'nonzeros':>10} {'build s':>8} "
        f"{'E0 / MHz':>11} {'gap / MHz':>9} {'method':>8}"
    )
    for photons in range(0, SITES + 1, 2):
        space = fm.FockSpace(modes=SITES, cutoff=max(photons, 1), total=photons)
        t0 = time.perf_counter()
        matrix = fm.build_matrix(h, space)
        build = time.perf_counter() - t0
        if space.dim >= 3:
            levels = fm.lowest_levels(h, space, k=2)
            e0, gap, method = levels.energies[0], levels.gap, levels.method
        else:
            e0, gap, method = float(matrix.toarray()[0, 0]), float("nan"), "dense"
        print(
            f"{photons:>7} {space.dim:>9,} {matrix.nnz:>10,} {build:>8.3f} "
            f"{e0:>11.4f} {gap:>9.4f} {method:>8}"
        )

    space = fm.FockSpace(modes=SITES, cutoff=SITES, total=SITES)
    ground = fm.ground_state(h, space)
    print(
        f"\nunit filling ({SITES} photons, {space.dim:,} states): E0 = {ground.energy:.6f} MHz "
        f"(residual {ground.residual:.1e}, {ground.method}, {ground.seconds:.2f} s)"
    )
    print("photons per resonator:", np.round(fm.populations(space, ground.vector), 4))
    print("number fluctuation   :", np.round(fm.number_variances(space, ground.vector)[0], 4))
    half = list(range(SITES // 2))
    entropy = fm.entanglement_entropy(space, ground.vector, half)
    print(f"entanglement entropy of half the ring: {entropy:.4f} nats")


if __name__ == "__main__":
    main()
