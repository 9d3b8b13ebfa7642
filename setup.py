"""Build of the optional compiled kernels (``bandmeter._kernels``); everything else is in
pyproject.toml. Where no C compiler is available the build of the extension is skipped
(``optional=True``) and bandmeter runs its NumPy paths, which give the same results (to the
last bit, or for the time weightings to 1e-13 relative; see ``bandmeter/compiled.py``)."""

from setuptools import Extension, setup

setup(
    ext_modules=[
        Extension(
            "bandmeter._kernels",
            sources=["bandmeter/_kernels.c"],
            extra_compile_args=["-O3", "-ffp-contract=off"],
            optional=True,
        )
    ]
)
