"""What the ``[fields]`` table adds to assembled operators: the thin-layer potential and vector potentials.

The discretisations call these from ``assemble(media, potential, terms)`` with
the :class:`~shellmodes.case.fields.FieldTerms` of the case.  Operators of a
problem with a vector potential are complex Hermitian, K = S + V + D + i C; the
parts D (|a|^2) and C (the cross term) and the field-free K are kept in
``Operators.extra`` for the labels (paramagnetic and diamagnetic parts of each
level, the field-free reference modes of the same mesh).
"""

from __future__ import annotations

import numpy as np
import skfem

__all__ = ["surface_field_operators", "volume_field_operators"]


def surface_field_operators(surface, shape, terms, K, lower: float):
    """(K, lower bound, extra) of a curved surface with the thin-layer and vector-potential terms added."""
    extra = {}
    if terms.thin_layer:
        from shellmodes.fem.forms import potential_form
        from shellmodes.fem.thin_layer import thin_layer_at_quadrature

        values = thin_layer_at_quadrature(shape, surface)
        K = K + skfem.asm(potential_form, surface.basis, pot=values)
        lower = lower + min(0.0, float(np.min(values)))
        extra["thin_layer"] = values
    if terms.complex:
        from shellmodes.fem.magnetic import surface_magnetic

        D, C = surface_magnetic(terms, surface)
        extra.update(diamagnetic=D, paramagnetic=C, field_free=K.tocsr())
        K = (K + D + 1j * C).tocsr()
    return K, lower, extra


def volume_field_operators(raw, terms, inverse_mass: dict, K):
    """(K, extra) of curved tetrahedra in a uniform field (each medium's 1/m on the magnetic terms)."""
    if not terms.complex:
        return K, {}
    from shellmodes.fem.magnetic import volume_magnetic

    D, C = volume_magnetic(terms, raw, inverse_mass)
    return (K + D + 1j * C).tocsr(), {"diamagnetic": D, "paramagnetic": C, "field_free": K.tocsr()}
