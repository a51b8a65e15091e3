"""One vocabulary: the README's lists of values are the registries the code validates with, every
option that takes a value from a fixed set lists those values in ``--help``, a former spelling
gets a "did you mean" with the present one, and an error names the Python argument when raised
from Python and the option on the command line.

The expected values here are the project's own registries (what the code accepts), so the
README and the help texts are checked against the code, not against a copy (no outside source
applies: these are the project's names).
"""

from __future__ import annotations

import ast
import re
import typing
from pathlib import Path
from typing import Any

import pytest
import yaml

from noiselab.cli.app import _command, main
from noiselab.cli.options import option_of
from noiselab.cli.values import ALLOWED, KEY_SETS, allowed_values
from noiselab.common.errors import InputError, arg
from noiselab.study.spec import study_from_mapping

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")
DEMO = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"
PROFILE = ROOT / "configs" / "devices" / "cobaltgrid-12.yaml"
TABLE_HEAD = "| what | study file | option | values |"


def _literal(model: Any, field: str) -> list[str]:
    return list(typing.get_args(model.model_fields[field].annotation))


def _readme_table() -> dict[tuple[str | None, str], list[str]]:
    """(command or None, option) -> the values the README's table lists."""
    rows: dict[tuple[str | None, str], list[str]] = {}
    lines = README[README.index(TABLE_HEAD) :].splitlines()[2:]
    for line in lines:
        if not line.startswith("|"):
            break
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        m = re.fullmatch(r"`(--[a-z-]+)`(?: \(([a-z ]+)\))?", cells[2])
        assert m is not None, line
        rows[(m.group(2), m.group(1))] = re.findall(r"`([^`]+)`", cells[3])
    return rows


def test_readme_table_lists_every_fixed_set_option_with_the_registry_values() -> None:
    rows = _readme_table()
    assert len(rows) == len(ALLOWED)  # one row per option with a fixed set, no more, no less
    for (command, option), listed in rows.items():
        key = f"{command.split()[-1]} {option}" if command else option
        assert key in ALLOWED or option in ALLOWED, (command, option)
        assert listed == list(allowed_values(command or "", [option]) or ()), (command, option)


def test_readme_recipe_comments_list_the_pass_options() -> None:
    from noiselab.mitigate.passes.extrapolate import ExtrapolateOptions
    from noiselab.mitigate.passes.postselect import PostselectOptions
    from noiselab.mitigate.passes.readout import ReadoutOptions

    readout = re.search(r"\{pass: readout, method: (\w+)\}\s+# or ([\w, ]+)\n", README)
    assert readout is not None
    listed = [readout.group(1), *[v.strip() for v in readout.group(2).split(",")]]
    assert listed == _literal(ReadoutOptions, "method")
    post = re.search(r"\{pass: postselect, mode: (\w+)\}\s+# or (\w+) ", README)
    assert post is not None
    assert [post.group(1), post.group(2)] == _literal(PostselectOptions, "mode")
    line = re.search(r"# amplifier: ([\w| ]+); fit: ([\w| ]+)\n", README)
    assert line is not None
    assert [v.strip() for v in line.group(1).split("|")] == _literal(
        ExtrapolateOptions, "amplifier"
    )
    assert [v.strip() for v in line.group(2).split("|")] == _literal(ExtrapolateOptions, "fit")


def test_readme_knob_sentence_lists_the_knobs() -> None:
    from noiselab.study.knobs import KNOBS

    text = " ".join(README.split())
    sentence = text[text.index("Knobs (`--knob`") :].split(". ")[0]
    listed = re.findall(r"`([a-z_0-9]+)`", sentence.split("scale):", 1)[1])
    assert listed == list(KNOBS)


def test_the_help_lists_each_fixed_set_option_from_its_registry() -> None:
    root = _command()
    context = type(root.make_context("noiselab", ["--help"], resilient_parsing=True))
    seen: set[str] = set()

    def walk(command: Any, ctx: Any) -> None:
        if hasattr(command, "commands"):  # a group
            for name, sub in command.commands.items():
                walk(sub, context(sub, info_name=name, parent=ctx))
            return
        command.get_help(ctx)  # the help is formatted: values are filled in then
        for param in command.params:
            values = allowed_values(str(command.name), getattr(param, "opts", ()))
            if values:
                assert param.help.endswith(f" Allowed: {', '.join(values)}."), param.opts
                seen.update(n for n in param.opts if n.startswith("--"))

    walk(root, context(root, info_name="noiselab"))
    # every registry entry belongs to an option of some command
    assert {k.split()[-1] for k in ALLOWED} <= seen


def test_tune_help_as_printed_lists_the_amplifiers(capsys: pytest.CaptureFixture[str]) -> None:
    from noiselab.study.grid import axis_values

    with pytest.raises(SystemExit) as info:
        main(["tune", "--help"])
    text = " ".join(capsys.readouterr().out.replace("│", " ").split())
    assert info.value.code == 0
    assert "Allowed: " + ", ".join(axis_values()["amplifier"]) + "." in text


def test_registries_are_the_validating_types() -> None:
    from noiselab.cli.values import two_qubit_gates
    from noiselab.device.profile import NativeGates
    from noiselab.study.grid import check_axes

    assert list(two_qubit_gates()) == _literal(NativeGates, "two_qubit")
    with pytest.raises(InputError, match=r"allowed: none, stretch"):
        from noiselab.study.grid import Grid

        check_axes(
            Grid(("none",), ("none",), ("folding",), ((1.0, 2.0),), ("linear",)),
            {a: a for a in ("readout", "postselect", "amplifier", "scales", "fit", "family")},
        )


def test_study_keys_which_refuses_others_listing_the_same_values(
    capsys: pytest.CaptureFixture[str],
) -> None:
    with pytest.raises(SystemExit) as info:
        main(["study", "keys", "--which", "all"])
    err = capsys.readouterr().err
    assert info.value.code == 2 and f"allowed: {', '.join(KEY_SETS)}" in err


# ---------------------------------------------------------------- former spellings


@pytest.mark.parametrize(
    ("former", "present"),
    [
        ("two-qubit-error", "two_qubit_error"),
        ("one-qubit-error", "single_qubit_error"),
        ("coherence-us", "coherence_us"),
        ("noise-scale", "noise_scale"),
        ("readout-error", "readout_error"),
        ("scale", "noise_scale"),
    ],
)
def test_former_knob_names_are_refused_with_the_present_one(former: str, present: str) -> None:
    from noiselab.study.knobs import get_knob

    with pytest.raises(InputError, match=f"did you mean `{present}`") as refused:
        get_knob(former)
    assert refused.value.message.startswith("sweep: knob: ")  # Python: the argument


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str]:
    with pytest.raises(SystemExit) as info:
        main(argv)
    return int(info.value.code or 0), capsys.readouterr().err


def test_former_spellings_on_the_command_line(capsys: pytest.CaptureFixture[str]) -> None:
    base = ["sweep", str(DEMO), "--no-cache", "-q"]
    rc, err = _run([*base, "--knob", "two-qubit-error"], capsys)
    assert rc == 2 and len(err.strip().splitlines()) == 1
    assert "--knob: unknown knob 'two-qubit-error' (did you mean `two_qubit_error`?)" in err
    for former, present in (("--vary", "--knob"), ("--from", "--start"), ("--to", "--stop")):
        rc, err = _run([*base, former, "1"], capsys)
        assert rc == 2 and f"(did you mean `{present}`?)" in err, err
    rc, err = _run(["tune", str(DEMO), "--amplification", "stretch"], capsys)
    assert rc == 2 and "(did you mean `--amplifier`?)" in err
    rc, err = _run(["scan", str(DEMO), "--recipe", "raw"], capsys)
    assert rc == 2 and "(did you mean `--recipes`?)" in err


def _demo() -> dict[str, Any]:
    data = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    data["device"] = str(PROFILE)
    return data


@pytest.mark.parametrize(
    ("section", "former", "present", "value"),
    [
        ("tune", "amplification", "amplifier", ["none"]),
        ("sweep", "vary", "knob", "noise_scale"),
    ],
)
def test_former_study_keys_suggest_the_present_key(
    section: str, former: str, present: str, value: Any
) -> None:
    data = _demo()
    data[section] = {former: value}
    expected = f"{section}.{former}: unknown key \\(did you mean `{present}`"
    with pytest.raises(InputError, match=expected):
        study_from_mapping(data, DEMO)


def test_a_former_knob_in_the_study_file_is_refused_with_the_present_one() -> None:
    data = _demo()
    data["sweep"] = {"knob": "two-qubit-error"}
    expected = r"sweep.knob: unknown knob .*did you mean `two_qubit_error`"
    with pytest.raises(InputError, match=expected):
        study_from_mapping(data, DEMO)


# ---------------------------------------------------------------- argument or option


def test_errors_from_python_name_the_argument() -> None:
    import noiselab

    cases = [
        (lambda: noiselab.sweep(DEMO, points=1, cache=False), r": points 1: "),
        (lambda: noiselab.sweep(DEMO, "noise_scale", start=-1.0, cache=False), r": start -1.0: "),
        (lambda: noiselab.sweep(DEMO, "noise_scale", recipes=["nope"], cache=False),
         r"recipes: unknown recipe 'nope'"),
        (lambda: noiselab.scan(DEMO, bond=(0, 1), points=1, cache=False), r"^points: 1; allowed"),
        (lambda: noiselab.assess(DEMO, drift=5000, cache=False), r"^drift: 5000 draws"),
        (lambda: noiselab.assess(DEMO, shots="2.5", cache=False), r": shots '2.5': "),
    ]  # fmt: skip
    for call, pattern in cases:
        with pytest.raises(InputError, match=pattern) as refused:
            call()
        assert "--" not in refused.value.message, refused.value.message
        assert "\x1e" not in refused.value.message and "\x1f" not in refused.value.message


@pytest.mark.parametrize(
    ("argv", "needle"),
    [
        (["sweep", str(DEMO), "--points", "1"], ": --points '1': "),
        (["sweep", str(DEMO), "--knob", "noise_scale", "--start", "-1"], ": --start -1.0: "),
        (["sweep", str(DEMO), "--recipes", "nope"], "--recipes: unknown recipe 'nope'"),
        (["scan", str(DEMO), "--bond", "0", "1", "--points", "1"], "--points: 1; allowed"),
        (["assess", str(DEMO), "--drift", "5000"], "--drift: 5000"),
        (["assess", str(DEMO), "--shots", "2.5"], "--shots '2.5': "),
    ],
)
def test_the_command_line_names_the_option(
    argv: list[str], needle: str, capsys: pytest.CaptureFixture[str]
) -> None:
    rc, err = _run([*argv, "--no-cache", "-q"], capsys)
    assert rc == 2 and len(err.strip().splitlines()) == 1 and needle in err, err


def test_argument_marks_render_either_way() -> None:
    error = InputError(f"sweep: {arg('start')}/{arg('stop')}: the range is empty")
    assert error.message == "sweep: start/stop: the range is empty"
    assert error.with_options(option_of).message == "sweep: --start/--stop: the range is empty"
    assert option_of("use_cache") == "--no-cache" and option_of("two_qubit_gate") == (
        "--two-qubit-gate"
    )


#: prose that names a command line on purpose (a note or a key's meaning), not an error's flag
PROSE = ("noiselab rehearse --grid", "noiselab assess --drift", "noiselab study keys --markdown",
         "apply to assess --drift", "free disk space or use --cache")  # fmt: skip


def test_no_layer_below_the_cli_writes_an_option_into_a_message() -> None:
    flag = re.compile(r"(^|[\s(/'`])--[a-z]")
    found = []
    for layer in ("common", "chem", "device", "emulate", "mitigate", "study", "report"):
        for path in sorted((ROOT / "noiselab" / layer).rglob("*.py")):
            tree = ast.parse(path.read_text(encoding="utf-8"))
            docs = {
                id(node.body[0].value)
                for node in ast.walk(tree)
                if isinstance(node, ast.Module | ast.FunctionDef | ast.ClassDef)
                and node.body
                and isinstance(node.body[0], ast.Expr)
            }
            for node in ast.walk(tree):
                if (
                    isinstance(node, ast.Constant)
                    and isinstance(node.value, str)
                    and id(node) not in docs
                    and flag.search(node.value)
                    and not any(p in node.value for p in PROSE)
                ):
                    found.append(f"{path.relative_to(ROOT)}:{node.lineno}: {node.value[:60]!r}")
    assert found == []
