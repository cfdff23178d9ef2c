"""Build the solver's compiled inner loop; everything else is declared in pyproject.toml.

The extension is optional: without a C compiler the package still installs and the solver
runs its numpy reference (slower; ``fieldtool.core.circuit.kernel.available()`` says which).
"""

from setuptools import Extension, setup

setup(
    ext_modules=[
        Extension(
            "fieldtool.core.circuit._kernel",
            sources=["fieldtool/core/circuit/_kernel.c"],
            optional=True,
        )
    ]
)
