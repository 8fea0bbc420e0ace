"""Maps the top-level folders into the one import package ``elopt``.

``physics/`` installs as ``elopt.physics`` and ``optimizer/`` as ``elopt.optimizer`` (``elopt``
itself is a namespace package), so nothing named ``physics`` or ``optimizer`` lands at the top
of site-packages. Everything else about the distribution lives in pyproject.toml.
"""

from setuptools import find_packages, setup

FOLDERS = ("physics", "optimizer")
subpackages = find_packages(include=[f"{f}{s}" for f in FOLDERS for s in ("", ".*")])

setup(
    packages=[f"elopt.{p}" for p in subpackages],
    package_dir={f"elopt.{f}": f for f in FOLDERS},
    package_data={"elopt.optimizer": ["**/*.md"]},
)
