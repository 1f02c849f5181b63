"""Reading an effective Hamiltonian: Pauli strings (``pauli``), named spin-1/2 couplings
(``couplings``), the spin form of a manifold of one spin-1/2 per site (``spin_form``) and
rational coefficients ``p/q t^n/U^(n-1)`` (``rationals``), couplings written as formulas
(``formulas``) and the geometry of coupling classes (``classes``)."""
