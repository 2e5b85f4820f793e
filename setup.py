"""Packaging beyond pyproject.toml (which holds the project's metadata).

The demo driver files stay in the top-level drivers/ folder and ship inside the package as
sweeper/drivers, so an installed sweeper finds them (sweeper.instruments.driverfile.
repository_drivers_dir); a source checkout or an editable install uses drivers/ itself.
"""

from setuptools import find_namespace_packages, setup

setup(
    packages=[*find_namespace_packages(include=["sweeper*"]), "sweeper.drivers"],
    package_dir={"sweeper.drivers": "drivers"},
    package_data={"sweeper": ["sim/*.yaml"], "sweeper.drivers": ["*.yaml"]},
)
