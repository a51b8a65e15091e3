"""Result records of the study jobs (frozen dataclasses) and their JSON / table forms.

Energies in Hartree (``_ha``), biases and standard errors in milli-Hartree (``_mha``). The JSON
form is deterministic for a given study and seed: timings and cache statistics are kept apart
(``RunStats``) and only added on request.

Over 400 lines: the records of assess and tune (and the run statistics, context summary and
ranking rule they share) are rebuilt from the cache by one ``_rebuild`` and written by one
JSON/CSV code path; keeping them together keeps that one round trip in one place.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import math
import time
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from noiselab.common.wording import CAUTION, target_words
from noiselab.mitigate.result import RecipeResult
from noiselab.study.display import NotebookDisplay


@dataclasses.dataclass(frozen=True)
class RunStats:
    """How a job ran: new simulations, cache hits, seconds (not part of the deterministic JSON)."""

    simulations: int
    cache_hits: int
    engine_seconds: float
    wall_seconds: float
    executor: str = "in-process"
    reused: bool = False  # the whole result came from the results cache

    @classmethod
    def of_runner(cls, runner: Any, t0: float, executor: str = "in-process") -> RunStats:
        """Counts of one caching runner, wall time since ``t0`` (``time.perf_counter``)."""
        return cls(
            simulations=runner.simulations,
            cache_hits=runner.cache_hits,
            engine_seconds=runner.engine_seconds,
            wall_seconds=time.perf_counter() - t0,
            executor=executor,
        )

    @classmethod
    def of_outcomes(cls, outs: Sequence[Any], t0: float, executor: str) -> RunStats:
        """Counts summed over the outcomes of a job's tasks, wall time since ``t0``."""
        return cls(
            simulations=sum(o.simulations for o in outs),
            cache_hits=sum(o.cache_hits for o in outs),
            engine_seconds=sum(o.engine_seconds for o in outs),
            wall_seconds=time.perf_counter() - t0,
            executor=executor,
        )

    @classmethod
    def reused_since(cls, t0: float) -> RunStats:
        """The stats of a job whose whole result was read from the results cache."""
        return cls(0, 0, 0.0, time.perf_counter() - t0, reused=True)

    def to_json(self) -> dict[str, Any]:
        return {
            "simulations": self.simulations,
            "cache_hits": self.cache_hits,
            "engine_seconds": round(self.engine_seconds, 4),
            "wall_seconds": round(self.wall_seconds, 4),
            "executor": self.executor,
            "reused_cached_result": self.reused,
        }


@dataclasses.dataclass(frozen=True)
class ContextSummary:
    """What the context found before any noise: energies (Ha) and the compiled circuit."""

    study: str
    source: str
    device: str
    device_source: str
    qubits: int
    encoding: str
    drop_fixed_parity_qubits: bool
    ansatz: str
    n_parameters: int
    exact_energy_ha: float
    hf_energy_ha: float
    ansatz_energy_ha: float
    patch: tuple[int, ...]
    two_qubit_count: int
    depth: int
    duration_ns: float
    estimated_fidelity: float | None
    n_groups: int
    exact_spin_squared: float | None = None  # <S^2> of the exact ground state
    ansatz_spin_squared: float | None = None  # <S^2> of the trial state at the optimum
    optimizer_starts: int = 1
    optimizer_stopped: str = ""  # noiselab.chem.optimize.STOP_REASONS
    warnings: tuple[str, ...] = ()  # about the noiseless optimum
    #: implausible profile values a typo produces (noiselab.device.profile.profile_warnings)
    device_warnings: tuple[str, ...] = ()
    compile_seeds: tuple[int, ...] = ()  # transpiler seeds tried
    compile_two_qubit_gates: tuple[int, ...] = ()  # per seed
    compile_durations_ns: tuple[float, ...] = ()  # per seed
    chosen_seed: int | None = None
    distinct_compiles: int = 1

    @property
    def ansatz_error_mha(self) -> float:
        return (self.ansatz_energy_ha - self.exact_energy_ha) * 1000.0

    def to_json(self) -> dict[str, Any]:
        return {
            "study": self.study,
            "source": self.source,
            "device": self.device,
            "device_source": self.device_source,
            "qubits": self.qubits,
            "encoding": self.encoding,
            "drop_fixed_parity_qubits": self.drop_fixed_parity_qubits,
            "ansatz": self.ansatz,
            "n_parameters": self.n_parameters,
            "exact_energy": self.exact_energy_ha,
            "exact_spin_squared": self.exact_spin_squared,
            "hartree_fock_energy": self.hf_energy_ha,
            "ansatz_energy": self.ansatz_energy_ha,
            "ansatz_error_mha": self.ansatz_error_mha,
            "ansatz_spin_squared": self.ansatz_spin_squared,
            "optimizer": {"starts": self.optimizer_starts, "stopped": self.optimizer_stopped},
            "warnings": list(self.warnings),
            "device_warnings": list(self.device_warnings),
            "compiled": {
                "patch": list(self.patch),
                "two_qubit_count": self.two_qubit_count,
                "depth": self.depth,
                "duration_ns": self.duration_ns,
                "estimated_fidelity": self.estimated_fidelity,
            },
            "compile": {
                "seeds_tried": list(self.compile_seeds),
                "two_qubit_gates": list(self.compile_two_qubit_gates),
                "duration_ns": list(self.compile_durations_ns),
                "chosen_seed": self.chosen_seed,
                "distinct_circuits": self.distinct_compiles,
            },
            "measurement_groups": self.n_groups,
        }


def context_from_record(data: Mapping[str, Any]) -> ContextSummary:
    """A ContextSummary from its ``asdict`` form (tuple fields restored)."""
    ctx = dict(data)
    ctx["patch"] = tuple(ctx["patch"])
    for key in ("warnings", "compile_seeds", "compile_two_qubit_gates", "compile_durations_ns"):
        ctx[key] = tuple(ctx.get(key, ()))
    return ContextSummary(**ctx)


def rank_key(result: Any) -> tuple[float, float, float]:
    """Sort key: highest probability within target first, then smallest |bias|, then fewest
    shots needed (so that, when no recipe reaches the target and every P is about 0, the
    closest one comes first, not the first in file order)."""
    needed = result.shots_needed
    return (
        -float(result.p_within_target),
        abs(float(result.bias_exact_mha)),
        math.inf if needed is None else float(needed),
    )


def best_of(results: Mapping[str, Any]) -> str:
    """Name of the best recipe by :func:`rank_key` (order of ``results`` breaks exact ties)."""
    names = list(results)
    return min(names, key=lambda n: (*rank_key(results[n]), names.index(n)))


#: limited_by of a fixed (shot-independent) variance -> (what it is, with ``{twirls}`` for the
#: number of random twirls; where its std sits in ``details``; the shots it ignores; the remedy)
FIXED_VERDICT: dict[str, tuple[str, tuple[str, ...], str, str]] = {
    "calibration": (
        "its readout-calibration noise",
        ("std_calibration_mha",),
        "measurement shots",
        "; raise the readout pass's calibration_shots",
    ),
    "amplification": (
        "the uncertainty of its realized noise amplification",
        ("std_amplification_mha",),
        "shots",
        "",
    ),
    "learning": (
        "the uncertainty of its learned noise model",
        ("error_cancellation", "std_learning_mha"),
        "shots",
        "",
    ),
    "twirl": (
        "the spread between its {twirls} random twirls",
        ("std_twirl_mha",),
        "shots",
        "; raise the twirl pass's draws",
    ),
    "truncation": (
        "the uncertainty of its truncation estimate",
        ("truncation_estimate_std_mha",),
        "shots",
        "; lower emulation.truncation.keep_factor or min_abs_coeff",
    ),
}


def fixed_variance_words(source: str, details: Mapping[str, Any]) -> str:
    """'<what it is> (<std> mHa) does not shrink with more shots<; remedy>' for a result that
    a fixed variance of ``source`` (a key of :data:`FIXED_VERDICT`) keeps out of reach."""
    what, path, shots, remedy = FIXED_VERDICT[source]
    std: Any = details
    for key in path:
        std = std.get(key) if isinstance(std, Mapping) else None
    amount = f" ({float(std):.3g} mHa)" if std is not None else ""
    what = what.format(twirls=details.get("twirl_instances", "finite"))
    return f"{what}{amount} does not shrink with more {shots}{remedy}"


def verdict_line(
    best_name: str,
    best: Any,
    target_mha: float,
    confidence: float,
    shots: int,
    what: str = "recipe",
) -> tuple[bool, str]:
    """(reachable at the budget, one plain sentence naming the best recipe).

    ``best`` is the first by :func:`rank_key`. When it does not reach the target (the one rule,
    P >= confidence), no recipe does: the sentence names it as the closest, with its bias.
    """
    from noiselab.mitigate.target import reaches_target

    goal = target_words(target_mha)
    p = float(best.p_within_target)
    needed = best.shots_needed
    if reaches_target(p, confidence):
        more = f"; {format_count(needed)} shots would do" if needed is not None else ""
        text = (
            f"Verdict: {goal} is reachable with {format_count(shots)} shots: best {what} "
            f"'{best_name}' lands within target with probability {p:.3f} "
            f"(>= {confidence:g}){more}."
        )
        return True, _with_amplification(text, best)
    head = (
        f"Verdict: no {what} reaches {goal} with {format_count(shots)} shots "
        f"(P >= {confidence:g}); closest is '{best_name}' at "
        f"{float(best.bias_exact_mha):+.3g} mHa (probability {p:.3f})"
    )
    details = getattr(best, "details", None) or {}
    if needed is not None:
        text = f"{head}: it would need {format_count(needed)} shots."
    elif str(best.limited_by) in FIXED_VERDICT:
        text = f"{head}: {fixed_variance_words(str(best.limited_by), details)}."
    else:
        text = f"{head}: its bias keeps it out of reach at any shot count."
    return False, _with_amplification(text, best)


def amplification_line(result: Any) -> str | None:
    """One line stating the amplification an extrapolated result assumes (None otherwise)."""
    details = getattr(result, "details", None) or {}
    ex = details.get("extrapolation") if isinstance(details, Mapping) else None
    if not isinstance(ex, Mapping):
        return None

    def listed(key: str) -> str:
        return ", ".join(f"{float(c):.3g}" for c in ex.get(key, []))

    if ex.get("amplifier") == "stretch":
        off = float(ex.get("amplification_offset", 0.0))
        systematic = (
            "no systematic error (amplification_offset 0)"
            if off == 0.0
            else f"a systematic error of {off * 100:+.3g} % (amplification_offset, in the bias)"
        )
        how = f"stretch by {listed('scales_nominal')} with {systematic} and"
    else:
        axis = "realized" if ex.get("scale_axis") == "realized" else "nominal"
        how = (
            f"{ex.get('amplifier')} folding at {listed('scales_nominal')} (realized "
            f"{listed('scales_realized')} from the compiled circuits' estimated error; fit "
            f"against the {axis} scales) with"
        )
    spread = float(ex.get("amplification_spread", 0.0))
    std = details.get("std_amplification_mha")
    cost = f"; {float(std):.3g} mHa of the error bar" if std is not None else ""
    return (
        f"Amplification assumed: {how} a {spread * 100:.3g} % random error (1 std) in each "
        f"amplified point's realized noise scale (amplification_spread{cost})."
    )


def training_line(result: Any) -> str | None:
    """One line stating what a Clifford-regression result assumes of its training circuits
    (None for other results)."""
    details = getattr(result, "details", None) or {}
    cr = details.get("clifford_regression") if isinstance(details, Mapping) else None
    if not isinstance(cr, Mapping) or cr.get("classical"):
        return None
    choice = details.get("std_training_choice_mha")
    cost = f"; the choice of rotations adds {float(choice):.3g} mHa (1 std)" if choice else ""
    return (
        f"Training assumed: {cr.get('assumption')} ({cr.get('training_circuits')} training "
        f"circuits, {format_count(cr.get('training_shots'))} of the shots{cost})."
    )


def learning_line(result: Any) -> str | None:
    """One line stating what an error-cancellation result assumes of its learned noise model
    (None for other results)."""
    details = getattr(result, "details", None) or {}
    ec = details.get("error_cancellation") if isinstance(details, Mapping) else None
    if not isinstance(ec, Mapping):
        return None
    error = float(ec.get("learning_error", 0.0))
    systematic = (
        "no systematic error (learning_error 0)"
        if error == 0.0
        else f"a systematic error of {error * 100:+.3g} % (learning_error, in the bias)"
    )
    spread = float(ec.get("learning_spread", 0.0))
    if spread == 0.0:
        return (
            f"Noise model assumed: the learned Pauli model's rates carry {systematic} and no "
            "random error (learning_spread 0: learned without statistical error, which favours "
            "the experiment)."
        )
    std = ec.get("std_learning_mha")
    cost = f"; {float(std):.3g} mHa of the error bar" if std is not None else ""
    return (
        f"Noise model assumed: the learned Pauli model's rates carry {systematic} and a "
        f"{spread * 100:.3g} % random error (1 std, learning_spread{cost})."
    )


def _with_amplification(text: str, result: Any) -> str:
    lines = [
        line
        for line in (amplification_line(result), training_line(result), learning_line(result))
        if line
    ]
    return " ".join([text, *lines])


def format_count(n: int | float | None) -> str:
    """Shot counts as people read them: 1,000,000 -> '1.0e6'; small counts in full."""
    if n is None:
        return "-"
    n = float(n)
    if not math.isfinite(n):
        return "inf"
    if n < 100_000:
        return f"{round(n):,}"
    exp = math.floor(math.log10(n))
    return f"{n / 10**exp:.1f}e{exp}"


def jsonable(value: Any) -> Any:
    """Plain JSON types from numpy arrays/scalars, tuples, dataclasses and pydantic models."""
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return jsonable(value.tolist())
    if isinstance(value, np.bool_ | bool):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating | float):
        v = float(value)
        return v if math.isfinite(v) else None
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return jsonable(dataclasses.asdict(value))
    if hasattr(value, "model_dump"):
        return jsonable(value.model_dump(mode="json"))
    if value is None or isinstance(value, str | int):
        return value
    return repr(value)


_TIMING_KEYS = frozenset({"engine_seconds", "seconds", "wall_seconds"})


def without_timings(value: Any) -> Any:
    """``value`` with every timing entry removed (they differ from run to run)."""
    if isinstance(value, Mapping):
        return {k: without_timings(v) for k, v in value.items() if k not in _TIMING_KEYS}
    if isinstance(value, list | tuple):
        return [without_timings(v) for v in value]
    return value


def recipe_json(result: Any, passes: Sequence[Mapping[str, Any]] | None = None) -> dict[str, Any]:
    """One recipe's entry in the assess JSON (energy in Ha, the rest in mHa / counts)."""
    out = {
        "energy": float(result.energy_ha),
        "bias_mha": float(result.bias_exact_mha),
        "bias_ansatz_mha": float(result.bias_ansatz_mha),
        "std_mha": float(result.std_mha),
        "shots": int(result.shots_total),
        "shots_per_circuit": jsonable(result.shots_per_circuit),
        "n_circuits": int(result.n_circuits),
        "p_within_target": float(result.p_within_target),
        "reaches_target": bool(result.reaches_target),
        "shots_needed": None if result.shots_needed is None else int(result.shots_needed),
        "limited_by": str(result.limited_by),
    }
    details = getattr(result, "details", {}) or {}
    # the emulator's own statistical error (trajectory method), apart from std_mha (shot noise);
    # null under the exact density-matrix method
    traj = details.get("trajectory_std_mha") if isinstance(details, Mapping) else None
    out["trajectory_std_mha"] = None if traj is None else float(traj)
    if isinstance(details, Mapping) and "truncation_bound_mha" in details:  # pauli_propagation
        out["truncation_bound_mha"] = float(details["truncation_bound_mha"])
        for k in ("truncation_estimate_mha", "truncation_estimate_std_mha", "truncation_limit_mha"):
            out[k] = float(details[k]) if k in details else None
    if passes is not None:
        out["passes"] = jsonable(list(passes))
    out["details"] = without_timings(jsonable(getattr(result, "details", {}) or {}))
    return out


#: Columns every scored row has (a recipe of assess, a setting of tune).
SCORE_HEADERS = (
    "bias (mHa)",
    "std. error (mHa)",
    "P(within target)",
    "shots needed",
    "limited by",
)
TABLE_HEADERS = ("recipe", "energy (Ha)", *SCORE_HEADERS)
#: Extra assess column when the trajectory method was used (its own statistical error).
TRAJECTORY_HEADER = "trajectory error (mHa)"
#: Assess column after the bias: max - min bias over the distinct compiles of the seed ensemble.
SPREAD_HEADER = "compile spread (mHa)"
#: Assess column with --drift: drawn device days on which the recipe reaches the target.
DRIFT_HEADER = "drift days reaching"
#: Assess and compare column: device time of the estimate at the budget.
DEVICE_HOURS_HEADER = "device hours (h)"


def format_hours(hours: float | None) -> str:
    """Device hours for a table cell (3 significant digits; "-" when unknown)."""
    return "-" if hours is None else f"{hours:.3g}"


def trajectory_std_of(result: Any) -> float | None:
    """A recipe result's trajectory standard error (mHa), None under exact emulation."""
    details = getattr(result, "details", {}) or {}
    value = details.get("trajectory_std_mha") if isinstance(details, Mapping) else None
    return None if value is None else float(value)


def _settings_json(result: Any) -> dict[str, Any]:
    """The run settings that open the JSON of assess and tune (after the context)."""
    return {
        "target_mha": result.target_mha,
        "confidence": result.confidence,
        "shots_budget": result.shots,
        "seed": result.seed,
        "emulation_method": result.emulation_method,
        "emulation_notice": result.emulation_notice,
    }


def _record_start(result: Any) -> dict[str, Any]:
    """First fields of an assess or tune record (see ``to_record``)."""
    return {
        "context": dataclasses.asdict(result.context),
        "target_mha": result.target_mha,
        "confidence": result.confidence,
        "shots": result.shots,
        "seed": result.seed,
    }


def _record_end(result: Any) -> dict[str, Any]:
    """Last fields of an assess or tune record."""
    return {
        "verdict": result.verdict,
        "caution": result.caution,
        "emulation_method": result.emulation_method,
        "emulation_notice": result.emulation_notice,
    }


def _common_fields(rec: Mapping[str, Any], stats: RunStats) -> dict[str, Any]:
    """Constructor fields that assess and tune results share, from a record."""
    return {
        "context": context_from_record(rec["context"]),
        "target_mha": rec["target_mha"],
        "confidence": rec["confidence"],
        "shots": rec["shots"],
        "seed": rec["seed"],
        "verdict": rec["verdict"],
        "stats": stats,
        "caution": rec["caution"],
        "emulation_method": rec.get("emulation_method", "density_matrix"),
        "emulation_notice": rec.get("emulation_notice"),
    }


@dataclasses.dataclass(frozen=True)
class DriftStats:
    """One recipe over ``assess --drift``'s drawn device days (biases in mHa, draw order)."""

    draws: int
    p_within_target_mean: float
    reaching: int  # days on which the recipe reaches the target (P >= confidence)
    bias_mha_p05: float
    bias_mha_p95: float
    biases_mha: tuple[float, ...]

    @property
    def fraction_reaching(self) -> float:
        return self.reaching / self.draws

    def to_json(self) -> dict[str, Any]:
        return {
            "draws": self.draws,
            "p_within_target_mean": self.p_within_target_mean,
            "fraction_reaching": self.fraction_reaching,
            "bias_mha_p05": self.bias_mha_p05,
            "bias_mha_p95": self.bias_mha_p95,
        }


@dataclasses.dataclass(frozen=True, repr=False)
class AssessResult(NotebookDisplay):
    """``assess``: every recipe of a study at its shot budget, the best one and the verdict."""

    context: ContextSummary
    target_mha: float
    confidence: float
    shots: int
    seed: int
    recipes: dict[str, Any]  # name -> noiselab.mitigate RecipeResult
    passes: dict[str, tuple[dict[str, Any], ...]]
    best_recipe: str
    reachable: bool
    verdict: str
    stats: RunStats
    caution: str = CAUTION
    emulation_method: str = "density_matrix"  # or "trajectory"
    emulation_notice: str | None = None  # why auto switched to trajectories
    #: per recipe, max - min bias over the distinct compiles (None: not computed)
    bias_spread_mha: dict[str, float | None] = dataclasses.field(default_factory=dict)
    #: per recipe, noiselab.study.drift.DriftStats over drawn device days (empty: no --drift)
    drift: dict[str, Any] = dataclasses.field(default_factory=dict)
    drift_rel_std: dict[str, float] = dataclasses.field(default_factory=dict)
    #: per recipe, device hours of its estimate at the budget (noiselab.study.device_time)
    device_hours: dict[str, float] = dataclasses.field(default_factory=dict)
    #: the device-time rule's inputs: repetition_delay_us, readout_ns, circuit_overhead_s
    device_time: dict[str, float] = dataclasses.field(default_factory=dict)

    @property
    def uses_trajectories(self) -> bool:
        return self.emulation_method == "trajectory"

    @property
    def study(self) -> str:
        return self.context.study

    @property
    def exact_energy_ha(self) -> float:
        return self.context.exact_energy_ha

    def to_json(self, *, with_stats: bool = False) -> dict[str, Any]:
        """The ``assess --json`` object (deterministic unless ``with_stats``)."""
        out = self.context.to_json()
        out.update(
            {
                **_settings_json(self),
                "units": {
                    "energy": "Ha",
                    "bias, std, trajectory_std": "mHa",
                    "shots": "total per estimate",
                    "device_hours": "hours of device time for the estimate at the budget",
                },
                "device_time": self.device_time,
                "recipes": {
                    name: {
                        **recipe_json(r, self.passes.get(name)),
                        "device_hours": self.device_hours.get(name),
                        "bias_spread_mha": self.bias_spread_mha.get(name),
                        "drift": self.drift[name].to_json() if name in self.drift else None,
                    }
                    for name, r in self.recipes.items()
                },
                "best_recipe": self.best_recipe,
                "reachable": self.reachable,
                "verdict": self.verdict,
                "caution": self.caution,
                "drift_rel_std": self.drift_rel_std or None,
            }
        )
        if with_stats:
            out["run"] = self.stats.to_json()
        return jsonable(out)

    def to_record(self) -> dict[str, Any]:
        """Everything needed to rebuild this result (see :meth:`from_record`), JSON-able."""
        return jsonable(
            {
                **_record_start(self),
                "recipes": {n: dataclasses.asdict(r) for n, r in self.recipes.items()},
                "passes": {n: list(p) for n, p in self.passes.items()},
                "best_recipe": self.best_recipe,
                "reachable": self.reachable,
                **_record_end(self),
                "bias_spread_mha": self.bias_spread_mha,
                "drift": {n: dataclasses.asdict(d) for n, d in self.drift.items()},
                "drift_rel_std": self.drift_rel_std,
                "device_hours": self.device_hours,
                "device_time": self.device_time,
            }
        )

    @classmethod
    def from_record(cls, rec: Mapping[str, Any], stats: RunStats) -> AssessResult:
        """Inverse of :meth:`to_record` (with the stats of the run that reused it)."""
        return cls(
            recipes={n: _rebuild(RecipeResult, r) for n, r in rec["recipes"].items()},
            passes={n: tuple(p) for n, p in rec["passes"].items()},
            best_recipe=rec["best_recipe"],
            reachable=rec["reachable"],
            **_common_fields(rec, stats),
            bias_spread_mha=dict(rec.get("bias_spread_mha") or {}),
            drift={n: _drift_stats(d) for n, d in (rec.get("drift") or {}).items()},
            drift_rel_std=dict(rec.get("drift_rel_std") or {}),
            device_hours=dict(rec["device_hours"]),  # older records lack it: recomputed
            device_time=dict(rec["device_time"]),
        )

    @property
    def has_spread(self) -> bool:
        """Whether the bias spread over compiles was computed (the table shows its column)."""
        return any(v is not None for v in self.bias_spread_mha.values())

    def summary(self) -> str:
        """One line: study, recipes, budget, best recipe and whether it reaches the target."""
        best = self.recipes[self.best_recipe]
        word = "reaches" if self.reachable else "does not reach"
        return (
            f"{self.context.study}: {len(self.recipes)} recipes at {self.shots:,} shots; best "
            f"{self.best_recipe!r} (bias {best.bias_exact_mha:+.3g} ± {best.std_mha:.3g} mHa) "
            f"{word} ±{self.target_mha:.4g} mHa"
        )

    def to_records(self) -> list[dict[str, Any]]:
        """One dict per recipe: energy (Ha), bias and standard error (mHa), P(within target),
        reaches, shots needed, what limits it."""
        return [
            {
                "recipe": name,
                "energy_ha": float(r.energy_ha),
                "bias_mha": float(r.bias_exact_mha),
                "std_mha": float(r.std_mha),
                "p_within_target": float(r.p_within_target),
                "reaches_target": bool(r.reaches_target),
                "shots_needed": r.shots_needed,
                "limited_by": r.limited_by,
            }
            for name, r in self.recipes.items()
        ]

    def table_headers(self) -> tuple[str, ...]:
        """TABLE_HEADERS (with the compile-spread column after the bias when computed), plus
        the trajectory-error column when trajectories were used."""
        head = TABLE_HEADERS
        if self.has_spread:
            i = head.index("bias (mHa)") + 1
            head = (*head[:i], SPREAD_HEADER, *head[i:])
        if self.drift:
            head = (*head, DRIFT_HEADER)
        if self.device_hours:
            head = (*head, DEVICE_HOURS_HEADER)
        return (*head, TRAJECTORY_HEADER) if self.uses_trajectories else head

    def table_rows(self) -> list[tuple[str, ...]]:
        """Rows for :meth:`table_headers`, formatted for people."""
        rows = []
        for name, r in self.recipes.items():
            row = _row(name, r)
            if self.has_spread:
                i = TABLE_HEADERS.index("bias (mHa)") + 1
                s = self.bias_spread_mha.get(name)
                row = (*row[:i], "-" if s is None else f"{s:.3f}", *row[i:])
            if self.drift:
                d = self.drift.get(name)
                row = (*row, "-" if d is None else f"{d.reaching}/{d.draws}")
            if self.device_hours:
                row = (*row, format_hours(self.device_hours.get(name)))
            if self.uses_trajectories:
                t = trajectory_std_of(r)
                row = (*row, "-" if t is None else f"{t:.3f}")
            rows.append(row)
        return rows

    def csv_rows(self) -> list[dict[str, Any]]:
        """Unformatted rows for the CSV (units in the column names)."""
        rows = []
        for name, r in self.recipes.items():
            rows.append(
                {
                    "recipe": name,
                    "energy_ha": float(r.energy_ha),
                    "bias_mha": float(r.bias_exact_mha),
                    "bias_ansatz_mha": float(r.bias_ansatz_mha),
                    "std_mha": float(r.std_mha),
                    "shots_total": int(r.shots_total),
                    "n_circuits": int(r.n_circuits),
                    "p_within_target": float(r.p_within_target),
                    "reaches_target": bool(r.reaches_target),
                    "shots_needed": "" if r.shots_needed is None else int(r.shots_needed),
                    "limited_by": str(r.limited_by),
                    "device_hours": self.device_hours.get(name, ""),
                }
            )
            if self.has_spread:
                s = self.bias_spread_mha.get(name)
                rows[-1]["bias_spread_mha"] = "" if s is None else s
            if name in self.drift:
                rows[-1].update(
                    {f"drift_{k}": v for k, v in self.drift[name].to_json().items()}
                )
            if self.uses_trajectories:
                t = trajectory_std_of(r)
                rows[-1]["trajectory_std_mha"] = "" if t is None else t
        return rows


def _drift_stats(data: Mapping[str, Any]) -> DriftStats:
    return _rebuild(DriftStats, data)


def _rebuild(cls: Any, data: Mapping[str, Any]) -> Any:
    """A frozen dataclass from its ``asdict`` form (tuple fields restored)."""
    names = {f.name: f for f in dataclasses.fields(cls)}
    kwargs = {}
    for k, v in data.items():
        if k not in names:
            continue
        if isinstance(v, list) and "tuple" in str(names[k].type):
            v = tuple(v)
        kwargs[k] = v
    return cls(**kwargs)


def _row(name: str, r: Any) -> tuple[str, ...]:
    return (name, f"{float(r.energy_ha):.6f}", *_score_cells(r))


def score_values(r: Any) -> dict[str, Any]:
    """Energy and score of a recipe result as CSV values (units in the keys)."""
    return {
        "energy_ha": float(r.energy_ha),
        "bias_mha": float(r.bias_exact_mha),
        "std_mha": float(r.std_mha),
        "p_within_target": float(r.p_within_target),
        "reaches_target": bool(r.reaches_target),
        "shots_needed": "" if r.shots_needed is None else int(r.shots_needed),
        "limited_by": str(r.limited_by),
    }


def _score_cells(r: Any) -> tuple[str, ...]:
    """The SCORE_HEADERS cells of a recipe result, formatted for people."""
    return (
        f"{float(r.bias_exact_mha):+.3f}",
        f"{float(r.std_mha):.3f}",
        f"{float(r.p_within_target):.3f}",
        format_count(r.shots_needed) if r.shots_needed is not None else "never",
        str(r.limited_by),
    )


def _yaml_value(value: Any) -> str:
    """A recipe option in YAML flow style (numbers as written: 1, 2.5; lists in brackets)."""
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_yaml_value(v) for v in value) + "]"
    return str(value)


@dataclasses.dataclass(frozen=True)
class TuneEntry:
    """One mitigation setting of a tune grid and its result."""

    rank: int
    label: str
    setting: dict[str, Any]
    passes: tuple[dict[str, Any], ...]
    result: Any  # RecipeResult


TUNE_HEADERS = ("rank", "setting", *SCORE_HEADERS)


@dataclasses.dataclass(frozen=True, repr=False)
class TuneResult(NotebookDisplay):
    """``tune``: every setting of the grid, ranked (best first)."""

    context: ContextSummary
    target_mha: float
    confidence: float
    shots: int
    seed: int
    entries: tuple[TuneEntry, ...]
    distinct_variants: int
    stats: RunStats
    verdict: str
    caution: str = CAUTION
    emulation_method: str = "density_matrix"  # or "trajectory"
    emulation_notice: str | None = None

    @property
    def best(self) -> TuneEntry:
        return self.entries[0]

    def recipe_yaml(self, rank: int = 1, name: str = "tuned") -> str:
        """The setting of ``rank`` as a ``recipes:`` entry of a study file, ready to paste
        (options left at null are left out)."""
        entry = self.entries[rank - 1]
        note = f"# tune rank {entry.rank}: {entry.label}"
        if not entry.passes:
            return f"  {name}: []  {note}"
        lines = [f"  {name}:  {note}"]
        for spec in entry.passes:
            parts = [f"pass: {spec['pass']}"]
            parts += [
                f"{k}: {_yaml_value(v)}" for k, v in spec.items() if k != "pass" and v is not None
            ]
            lines.append("    - {" + ", ".join(parts) + "}")
        return "\n".join(lines)

    def summary(self) -> str:
        """One line: study, settings, best setting and its bias."""
        r = self.best.result
        return (
            f"{self.context.study}: {len(self.entries)} settings ranked; best {self.best.label!r} "
            f"(bias {r.bias_exact_mha:+.3g} ± {r.std_mha:.3g} mHa, P(within "
            f"±{self.target_mha:.4g} mHa) {r.p_within_target:.3f})"
        )

    def to_records(self) -> list[dict[str, Any]]:
        """One dict per setting, best first: rank, setting, bias and std (mHa), P, reaches."""
        return [
            {
                "rank": e.rank,
                "setting": e.label,
                "bias_mha": float(e.result.bias_exact_mha),
                "std_mha": float(e.result.std_mha),
                "p_within_target": float(e.result.p_within_target),
                "reaches_target": bool(e.result.reaches_target),
                "shots_needed": e.result.shots_needed,
            }
            for e in self.entries
        ]

    def csv_rows(self) -> list[dict[str, Any]]:
        rows = []
        for e in self.entries:
            r = e.result
            row: dict[str, Any] = {"rank": e.rank, "setting": e.label}
            row.update({k: _csv_value(v) for k, v in e.setting.items()})
            row.update({**score_values(r), "n_circuits": int(r.n_circuits)})
            if self.emulation_method == "trajectory":
                t = trajectory_std_of(r)
                row["trajectory_std_mha"] = "" if t is None else t
            rows.append(row)
        return rows

    def table_rows(self, top: int = 10) -> list[tuple[str, ...]]:
        out = []
        for e in self.entries[:top]:
            out.append((str(e.rank), e.label, *_score_cells(e.result)))
        return out

    def to_record(self) -> dict[str, Any]:
        """Everything needed to rebuild this result (see :meth:`from_record`), JSON-able."""
        return jsonable(
            {
                **_record_start(self),
                "entries": [
                    {
                        "rank": e.rank,
                        "label": e.label,
                        "setting": e.setting,
                        "passes": list(e.passes),
                        "result": dataclasses.asdict(e.result),
                    }
                    for e in self.entries
                ],
                "distinct_variants": self.distinct_variants,
                **_record_end(self),
            }
        )

    @classmethod
    def from_record(cls, rec: Mapping[str, Any], stats: RunStats) -> TuneResult:
        """Inverse of :meth:`to_record` (with the stats of the run that reused it)."""
        entries = tuple(
            TuneEntry(
                rank=e["rank"],
                label=e["label"],
                setting=e["setting"],
                passes=tuple(e["passes"]),
                result=_rebuild(RecipeResult, e["result"]),
            )
            for e in rec["entries"]
        )
        return cls(
            entries=entries,
            distinct_variants=rec["distinct_variants"],
            **_common_fields(rec, stats),
        )

    def to_json(self, *, with_stats: bool = False) -> dict[str, Any]:
        out = self.context.to_json()
        out.update(
            {
                **_settings_json(self),
                "settings": len(self.entries),
                "distinct_variants": self.distinct_variants,
                "ranking": [
                    {
                        "rank": e.rank,
                        "setting": e.label,
                        "options": e.setting,
                        "passes": list(e.passes),
                        **{
                            k: v
                            for k, v in recipe_json(e.result).items()
                            if k not in {"details", "passes"}
                        },
                    }
                    for e in self.entries
                ],
                "verdict": self.verdict,
                "caution": self.caution,
            }
        )
        if with_stats:
            out["run"] = self.stats.to_json()
        return jsonable(out)


def _csv_value(v: Any) -> Any:
    if isinstance(v, list | tuple):
        return " ".join(f"{x:g}" if isinstance(x, float) else str(x) for x in v)
    return v


def csv_text(rows: Sequence[Mapping[str, Any]]) -> str:
    """CSV text of ``rows`` (columns from the first row, then any new keys in order)."""
    columns: list[str] = []
    for row in rows:
        for k in row:
            if k not in columns:
                columns.append(k)
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=columns, lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: row.get(k, "") for k in columns})
    return buf.getvalue()
