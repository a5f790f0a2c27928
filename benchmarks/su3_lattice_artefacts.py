"""One-off (not collected by ``python -m benchmarks``): the a^2 approach of a genuine SU(3) charge-2 start.

Prints the table of the README's SU(3) section: for open-boundary starts of one genuine SU(3) charge-2
field (complex ADHM data, two lumps of size rho = 1 with independent SU(3) orientations) on a fixed
box at several spacings, the Wilson action over the continuum action of the same region
(:func:`instantonkit.lattice.references.continuum_reference`), the expected ratio 1 - (1/5)(a/rho)^2 -
(1/70)(a/rho)^4 (García Pérez, González-Arroyo, Snippe, van Baal, Nucl. Phys. B 413 (1994) 535, from
memory), S / (8 pi^2 k) and the clover charge over the continuum charge of the clovers' region.

    python benchmarks/su3_lattice_artefacts.py [L ...]
"""

from __future__ import annotations

import sys
import time

import numpy as np

import instantonkit as ik
from instantonkit.adhm import unitary_moduli as um
from instantonkit.lattice import observables as ob
from instantonkit.lattice import references

BOX = 4.5  # side of the lattice's box, in units of rho
CENTRES = np.array([[0.0, 0.0, 0.0, 0.0], [1.5, 0.0, 0.5, 0.0]])


def genuine_charge_two():
    """Charge-2 SU(3) data with orientations 1 and a fixed SU(3) matrix exp(i H), H traceless Hermitian."""
    h = np.array([[0.3, 0.8 - 0.2j, 0.1j], [0.8 + 0.2j, -0.5, 0.6], [-0.1j, 0.6, 0.2]])
    w, v = np.linalg.eigh(h)
    g = v @ np.diag(np.exp(1j * w)) @ v.conj().T
    return um.unitary_multi_instanton(CENTRES, [1.0, 1.0], np.stack([np.eye(3), g]), rank=3)


def row(data, n: int) -> dict:
    a = BOX / n
    origin = CENTRES.mean(axis=0) - a * (n - 1) / 2
    t = time.perf_counter()
    st = ik.lattice_start(data, (n,) * 4, a, origin=origin, group="su3", boundary="open")
    u = st.links
    ref = references.continuum_reference(data, (n,) * 4, a, origin=origin, boundary="open")
    s_w = ob.wilson_action(u, boundary="open")
    q_c = ob.clover_charge(u, boundary="open")
    # the clovers cover [origin + a/2, origin + a (n - 3/2)]: the continuum charge there (self-dual: S / 8 pi^2)
    inner = references.continuum_reference(data, (n - 1,) * 4, a, origin=origin + a / 2, boundary="open")
    unit = float(np.max(np.abs(np.einsum("...ji,...jk->...ik", u.conj(), u) - np.eye(3))))
    return dict(
        L=n,
        a=a,
        s_over_8pi2k=s_w / (8 * np.pi**2 * 2),
        s_ratio=s_w / ref["box_action"],
        expected=1 - (a**2) / 5 - (a**4) / 70,
        q_clover=q_c,
        q_ratio=q_c / (inner["box_action"] / (8 * np.pi**2)),
        unitarity=unit,
        det=float(np.max(np.abs(np.linalg.det(u) - 1))),
        seconds=time.perf_counter() - t,
    )


if __name__ == "__main__":
    sizes = [int(v) for v in sys.argv[1:]] or [6, 8, 10]
    data = genuine_charge_two()
    print(
        "| L | a/rho | S_W/(8 pi^2 k) | S_W/S_box | 1 - a^2/5 - a^4/70 | Q_clover | Q_clover/Q_box | max|U^dag U - 1| |"
    )
    for n in sizes:
        r = row(data, n)
        print(
            f"| {r['L']} | {r['a']:.4f} | {r['s_over_8pi2k']:.5f} | {r['s_ratio']:.5f} | {r['expected']:.5f} | "
            f"{r['q_clover']:.5f} | {r['q_ratio']:.5f} | {r['unitarity']:.1e} |  ({r['seconds']:.0f} s)",
            flush=True,
        )
