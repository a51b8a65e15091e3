"""``noiselab`` run in-process, as the console entry point runs it."""

from __future__ import annotations

import contextlib
import io


def run_main(argv: list[str]) -> tuple[int, str, str]:
    """``noiselab argv`` in-process: (exit code, stdout, stderr)."""
    from noiselab.cli.app import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            main(argv)
            code = 0
        except SystemExit as exc:
            code = int(exc.code or 0)
    return code, out.getvalue(), err.getvalue()
