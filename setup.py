"""Packages are found, not listed: every package under the three source folders installs under
the `topdrift` namespace (models/ as topdrift.models, and so on), so that no generic top-level
name is taken. Everything else about the project is in pyproject.toml."""

from setuptools import find_packages, setup

ROOTS = ("models", "integrators", "benchmarks")

packages, package_dir = [], {}
for root in ROOTS:
    package_dir[f"topdrift.{root}"] = root
    packages += [f"topdrift.{root}"] + [f"topdrift.{root}.{p}" for p in find_packages(root)]

setup(packages=packages, package_dir=package_dir)
