"""The t-J model with the three-site term built with QuSpin, as an independent reference.

``H = -t sum_<ij>,s (c+_is c_js + h.c.) + J sum_<ij> (S_i.S_j - n_i n_j / 4)
      - K sum_(i,j,k) sum_s (c+_is n_j,-s c_ks - c+_is c+_j,-s c_js c_k,-s + h.c.) + E0``

on QuSpin's spinful-fermion basis without double occupancy (``double_occupancy=False``),
so every operator acts as ``P O P`` (Chao, Spalek & Oles, J. Phys. C 10, L271 (1977);
MacDonald, Girvin & Yoshioka, Phys. Rev. B 37, 9753 (1988)).  QuSpin writes a spinful
operator as ``"up ops|down ops"``; the three-site products are reordered here into that
form (each swap of two fermion operators of different modes a sign).
"""

from __future__ import annotations

import numpy as np


def quspin_tj_levels(n_sites, bonds, paths, particles, *, t, j, k, constant=0.0):
    """All levels, ascending, of the t-J model above on ``bonds`` and three-site ``paths``
    ``(i, j, k)`` (j the middle), with ``particles`` electrons of any S^z."""
    from quspin.basis import spinful_fermion_basis_1d
    from quspin.operators import hamiltonian
    nf = [(up, particles - up) for up in range(particles + 1)]
    basis = spinful_fermion_basis_1d(n_sites, Nf=nf, double_occupancy=False)
    static = []

    def add(op, *entries):
        static.append([op, [list(e) for e in entries]])

    for a, b in bonds:
        for x, y in ((a, b), (b, a)):
            add("+-|", (-t, x, y))
            add("|+-", (-t, x, y))
        # S.S - n n / 4 with S^z = (n_up - n_dn)/2: the equal-spin parts cancel
        add("n|n", (-j / 2, a, b), (-j / 2, b, a))
        add("+-|-+", (j / 2, a, b, a, b), (j / 2, b, a, b, a))
    for a, m, b in paths:
        for x, y in ((a, b), (b, a)):
            add("+-|n", (-k, x, y, m))       # c+_x,up n_m,dn c_y,up
            add("n|+-", (-k, m, x, y))       # c+_x,dn n_m,up c_y,dn
            # -(c+_x,up c+_m,dn c_m,up c_y,dn) = +c+_x,up c_m,up c+_m,dn c_y,dn, times -K
            add("+-|+-", (-k, x, m, m, y))
            # -(c+_x,dn c+_m,up c_m,dn c_y,up) = +c+_m,up c_y,up c+_x,dn c_m,dn, times -K
            add("+-|+-", (-k, m, y, x, m))
    h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_symm=False,
                    check_herm=False, check_pcon=False)
    return np.linalg.eigvalsh(h.toarray()) + constant
