"""Build hook: ship the bundled demo profiles and scenario inside the package.

``hardware_profiles/`` stays where people look for it (the top of the
repository); this maps it to the package ``compensator.demo_profiles`` so a
plain ``pip install .`` carries it, and ``compensator demo`` runs from any
folder. Everything else is declared in ``pyproject.toml``.
"""

from setuptools import find_packages, setup

setup(
    packages=[*find_packages(include=["compensator", "compensator.*"]), "compensator.demo_profiles"],
    package_dir={"compensator.demo_profiles": "hardware_profiles"},
    package_data={"compensator": ["py.typed"], "compensator.demo_profiles": ["*.yaml", "*.csv", "README.md"]},
)
