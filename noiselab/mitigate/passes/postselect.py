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

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, Literal

import numpy as np

from noiselab.common.errors import InputError
from noiselab.mitigate.base import (
    STAGE_ESTIMATE,
    Estimated,
    MitigationPass,
    PassOptions,
    VariantData,
    Workspace,
    plan_estimate,
)
from noiselab.mitigate.estimate import Estimate, total
from noiselab.mitigate.plan import assign_to_bases, measurable_in, parity_signs, support_mask
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.symmetry import symmetry_table, verification_ops
from noiselab.mitigate.variants import CircuitVariant


class PostselectOptions(PassOptions):
    mode: Literal["discard", "verify"] = "discard"
    symmetries: tuple[str, ...] | None = None  # None: every symmetry the encoding keeps


@dataclass(frozen=True)
class PostselectReport(PassReport):
    """Per variant label: ``discard`` the kept fraction of each basis that reveals a symmetry
    (the bases that reveal none keep everything), ``verify`` the sector weight <P>; and the
    fallbacks taken (``warnings``)."""

    kind: ClassVar[str] = "postselect"
    mode: str
    acceptance: Mapping[str, Mapping[str, float]]
    sector_weight: Mapping[str, float]
    warnings: tuple[str, ...] = ()

    def kept_shots(self, run: ScoredRun) -> float:
        """Measurement shots kept after the selection, over all variants and bases."""
        kept = 0.0
        for v in run.variants:
            acc = self.acceptance.get(v.label, {})
            kept += sum(run.shots[(v.label, b)] * acc.get(b, 1.0) for b in run.bases)
        return kept

    def acceptance_rate(self, run: ScoredRun) -> float:
        """Kept fraction of the shots of the bases that reveal a symmetry (1 if none does)."""
        selected = [
            (run.shots[(v.label, b)], a)
            for v in run.variants
            for b, a in self.acceptance.get(v.label, {}).items()
        ]
        n_sel = sum(n for n, _ in selected)
        return sum(n * a for n, a in selected) / n_sel if n_sel else 1.0

    def details(self, run: ScoredRun) -> dict[str, Any]:
        out: dict[str, Any] = {}
        if self.mode == "discard":
            out["acceptance"] = {k: dict(v) for k, v in self.acceptance.items()}
            out["effective_shots"] = self.kept_shots(run)
            out["acceptance_rate"] = self.acceptance_rate(run)
        else:
            out["sector_weight"] = dict(self.sector_weight)
        if self.warnings:
            out["postselect_warnings"] = list(self.warnings)
        return out


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
        known = getattr(self, "_selected", None)
        if known is not None and known[0] is ctx.problem:
            return list(known[1])
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
        out = [(nm, *table[nm]) for nm in names]
        self._selected = (ctx.problem, tuple(out))  # a loop re-runs the recipe on one problem
        return out

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

    def estimate(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimated:
        if self.options.mode == "verify":
            return self._verify(variant, data, ws)
        ctx = ws.ctx
        syms = self.selected(ctx)
        n = ctx.plan.num_qubits
        acc: dict[str, float] = {}
        warnings: list[str] = []
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
            kept = d.estimate(mask)
            if kept.value <= 1e-12:  # nothing accepted (possible with very few sampled shots)
                warnings.append(
                    f"{variant.label()}:{g.basis}: no shot accepted; group used without selection"
                )
                parts.append(d.estimate(g.weights))
                continue
            parts.append(d.estimate(mask * g.weights) / kept)
            acc[g.basis] = kept.value
        report = PostselectReport("discard", {variant.label(): acc}, {}, tuple(warnings))
        return Estimated(total(parts) + ctx.plan.constant, report)

    def _verify(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimated:
        c_num, w_num, c_den, w_den = self._verify_weights(ws.ctx)
        hp = total([data[b].estimate(w) for b, w in w_num.items()]) + c_num  # <H P>
        p = total([data[b].estimate(w) for b, w in w_den.items()]) + c_den  # <P>
        label = variant.label()
        if p.value <= 1e-12:
            warning = f"{label}: sector weight <P> <= 0; plain estimate used"
            report = PostselectReport("verify", {}, {label: p.value}, (warning,))
            return Estimated(plan_estimate(ws.ctx, data), report)
        return Estimated(hp / p, PostselectReport("verify", {}, {label: p.value}))
