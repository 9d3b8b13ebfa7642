"""Build of the optional compiled kernels (``bandmeter._kernels``); everything else is in
pyproject.toml. Where no C compiler is available the build of the extension is skipped
(``optional=True``) and bandmeter runs its NumPy paths, which give the same results (to the
last bit, or within 1e-9 dB where they regroup the arithmetic, bands within 1e-12 of the
total band energy; see ``bandmeter/compiled.py``).

The kernels must round every operation as written: no fused multiply-adds and no fast-math
reassociation, whatever the compiler.
"""

from setuptools import Extension, setup
from setuptools.command.build_ext import build_ext

#: Optimisation and strict floating point, per compiler family.
COMPILE_ARGS = {
    "msvc": ["/O2", "/fp:precise"],
    "unix": ["-O3", "-ffp-contract=off", "-fno-fast-math"],
}


class StrictFloatBuildExt(build_ext):
    """build_ext that sets the compile options of the compiler actually used."""

    def build_extensions(self) -> None:
        args = COMPILE_ARGS.get(self.compiler.compiler_type, COMPILE_ARGS["unix"])
        for extension in self.extensions:
            extension.extra_compile_args = list(args)
        super().build_extensions()


setup(
    ext_modules=[
        Extension("bandmeter._kernels", sources=["bandmeter/_kernels.c"], optional=True)
    ],
    cmdclass={"build_ext": StrictFloatBuildExt},
)
