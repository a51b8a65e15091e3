"""Build step: the wheel carries a copy of the top-level configs/ as noiselab/shipped/.

All metadata lives in pyproject.toml. configs/ stays the one source of truth: a source checkout
and an editable install read it directly (noiselab.common.shipped finds either copy).
"""

from pathlib import Path

from setuptools import setup
from setuptools.command.build_py import build_py

SHIPPED = ("devices", "studies")


class BuildWithShippedConfigs(build_py):
    """build_py that also copies configs/{devices,studies}/*.yaml into the built package."""

    def run(self) -> None:
        super().run()
        if getattr(self, "editable_mode", False):
            return
        root = Path(__file__).resolve().parent / "configs"
        for kind in SHIPPED:
            target = Path(self.build_lib) / "noiselab" / "shipped" / kind
            target.mkdir(parents=True, exist_ok=True)
            for src in sorted((root / kind).glob("*.yaml")):
                self.copy_file(str(src), str(target / src.name))


setup(cmdclass={"build_py": BuildWithShippedConfigs})
