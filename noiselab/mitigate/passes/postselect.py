"""Symmetry post-selection on the Z2 symmetries of the encoding (particle-number and Sz parities).

Modes:

* ``discard``: in every measurement basis that reveals a symmetry (all its support qubits measured
  in the symmetry's own letters, Z for the usual Z-strings), outcomes outside the target sector are
  dropped and the group's estimate is renormalized: R_g = sum_k m_k w_k q_k / sum_k m_k q_k (a ratio
  estimator; its variance from the delta method accounts for the lost shots). Bases that reveal no
  symmetry are used as they are. In expectation R_g = Tr(P_g rho P_g H_g) / Tr(P_g rho), with P_g
  the projector onto the sector of the symmetries revealed by group g's basis.
* ``verify``: symmetry verification in post-processing (Bonet-Monroig, Sagastizabal, Singh and
  O'Brien, PRA 98, 062339 (2018)): with P = prod_s (1 + lambda_s S_s) / 2 and [H, S_s] = 0,
  E = <H P> / <P> = Tr(P rho P H) / Tr(P rho); for one symmetry
  E = (<H> + lambda <H S>) / (1 + lambda <S>).
  The Pauli terms of H P and P are measured in the plan's bases where they fit and in extra bases
  otherwise; the extra bases share the shot budget of the circuit (their cost is reported).
"""

from __future__ import annotations

from typing import ClassVar, Literal

import numpy as np

from noiselab.common.errors import InputError
from noiselab.mitigate.base import (
    STAGE_ESTIMATE,
    MitigationPass,
    PassOptions,
    VariantData,
    Workspace,
    plan_estimate,
)
from noiselab.mitigate.estimate import Estimate, linear_combination, ratio
from noiselab.mitigate.plan import assign_to_bases, measurable_in, parity_signs, support_mask
from noiselab.mitigate.symmetry import symmetry_table, verification_ops
from noiselab.mitigate.variants import CircuitVariant


class PostselectOptions(PassOptions):
    mode: Literal["discard", "verify"] = "discard"
    symmetries: tuple[str, ...] | None = None  # None: every symmetry the encoding keeps


class PostselectPass(MitigationPass):
    """Symmetry post-selection (discard) or verification in post-processing (verify)."""

    name: ClassVar[str] = "postselect"
    stage: ClassVar[int] = STAGE_ESTIMATE
    Options: ClassVar[type[PassOptions]] = PostselectOptions
    options: PostselectOptions

    def describe(self) -> str:
        syms = "" if self.options.symmetries is None else ":" + "+".join(self.options.symmetries)
        return f"postselect({self.options.mode}{syms})"

    def selected(self, ctx, where: str = "postselect") -> list[tuple[str, str, int]]:
        table = symmetry_table(ctx.problem)
        names = self.options.symmetries
        if not table:
            raise InputError(
                f"{where}.symmetries: this encoding keeps no symmetry to post-select on (the "
                "dropped fixed parity qubits removed them); allowed: none, drop this pass"
            )
        if names is None:
            names = tuple(table)
        if len(names) == 0:
            raise InputError(f"{where}.symmetries: empty list; allowed: {', '.join(table)}")
        for nm in names:
            if nm not in table:
                raise InputError(
                    f"{where}.symmetries: {nm!r} is not a symmetry of this encoding; "
                    f"allowed: {', '.join(table)}"
                )
        return [(nm, *table[nm]) for nm in names]

    def check(self, ctx, where: str) -> None:
        self.selected(ctx, where)
        if self.options.mode == "verify" and not getattr(ctx, "verification_bases", True):
            raise InputError(
                f"{where}.mode: verify needs the extra verification bases, but this experiment "
                "context was built without them (verification_bases=False); allowed: discard, "
                "or a context built with verification_bases=True"
            )

    def _verify_weights(self, ctx):
        cache = getattr(self, "_cache", None)
        if cache is not None and cache[0] is ctx:
            return cache[1]
        syms = self.selected(ctx)
        hp, p = verification_ops(ctx.problem.hamiltonian, [(lab, eig) for _, lab, eig in syms])
        bases = ctx.measured_bases
        c_num, w_num, new_num = assign_to_bases(hp, bases)
        c_den, w_den, new_den = assign_to_bases(p, bases)
        if new_num or new_den:
            raise InputError(
                "postselect: the runner does not measure the bases verification needs: "
                f"{', '.join(new_num + new_den)}"
            )
        out = (c_num, w_num, c_den, w_den)
        self._cache = (ctx, out)
        return out

    def bases(self, ctx) -> tuple[str, ...]:
        if self.options.mode == "discard":
            return ctx.plan.bases
        _, w_num, _, w_den = self._verify_weights(ctx)
        used = set(w_num) | set(w_den)
        plan_bases = set(ctx.plan.bases)
        return tuple(b for b in ctx.measured_bases if b in used or b in plan_bases)

    def estimate(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimate:
        ctx = ws.ctx
        if self.options.mode == "verify":
            return self._verify(variant, data, ws)
        syms = self.selected(ctx)
        n = ctx.plan.num_qubits
        acc: dict[str, float] = {}
        parts: list[Estimate] = []
        for g in ctx.plan.groups:
            revealed = [(lab, eig) for _, lab, eig in syms if measurable_in(lab, g.basis)]
            d = data[g.basis]
            if not revealed:
                parts.append(d.estimate(g.weights))
                continue
            signs = parity_signs([support_mask(lab) for lab, _ in revealed], n)
            eigs = np.array([eig for _, eig in revealed], dtype=float)[:, None]
            mask = np.all(signs == eigs, axis=0).astype(float)
            den = d.estimate(mask)
            if den.value <= 1e-12:  # nothing accepted (possible with very few sampled shots)
                ws.details.setdefault("postselect_warnings", []).append(
                    f"{variant.label()}:{g.basis}: no shot accepted; group used without selection"
                )
                parts.append(d.estimate(g.weights))
                continue
            num = d.estimate(mask * g.weights)
            parts.append(ratio(num, den))
            acc[g.basis] = den.value
        est = linear_combination([1.0] * len(parts), parts)
        ws.details.setdefault("acceptance", {})[variant.label()] = acc
        return Estimate(est.value + ctx.plan.constant, est.influence)

    def _verify(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimate:
        c_num, w_num, c_den, w_den = self._verify_weights(ws.ctx)
        num = linear_combination(
            [1.0] * len(w_num), [data[b].estimate(w) for b, w in w_num.items()]
        )
        den = linear_combination(
            [1.0] * len(w_den), [data[b].estimate(w) for b, w in w_den.items()]
        )
        num = Estimate(num.value + c_num, num.influence)
        den = Estimate(den.value + c_den, den.influence)
        ws.details.setdefault("sector_weight", {})[variant.label()] = den.value
        if den.value <= 1e-12:
            ws.details.setdefault("postselect_warnings", []).append(
                f"{variant.label()}: sector weight <P> <= 0; plain estimate used"
            )
            return plan_estimate(ws.ctx, data)
        return ratio(num, den)
