"""Build of the compiled core. Cython is a build requirement (pyproject.toml), so the
generated C is never committed. The sdist carries the C sources (MANIFEST.in); the wheel
carries the compiled core, the modules and the shipped tables only."""
from Cython.Build import cythonize
from setuptools import Extension, setup
from setuptools.command.build_py import build_py


class BuildPy(build_py):
    """The ctmtab package maps to the repository root; keep setup.py out of it."""

    def find_package_modules(self, package, package_dir):
        modules = super().find_package_modules(package, package_dir)
        return [mod for mod in modules if not (package == "ctmtab" and mod[1] == "setup")]


core = Extension(
    "ctmtab.enumerator._core",
    sources=["enumerator/_core.pyx", "enumerator/csrc/ctm_core.c", "enumerator/csrc/ctm_map.c",
             "enumerator/csrc/ctm_prove.c"],
    depends=["enumerator/csrc/ctm_core.h", "enumerator/csrc/ctm_count.h", "enumerator/csrc/ctm_search.inc"],
    include_dirs=["enumerator"],
    extra_compile_args=["-O3", "-std=gnu99", "-Wall", "-Wextra"],
)

setup(
    # One import namespace, ctmtab, over the top-level folders (docs/DESIGN.md section 8).
    package_dir={
        "ctmtab": ".",
        "ctmtab.enumerator": "enumerator",
        "ctmtab.model": "model",
        "ctmtab.tables": "tables",
        "ctmtab.tools": "tools",
    },
    packages=["ctmtab", "ctmtab.enumerator", "ctmtab.model", "ctmtab.tables", "ctmtab.tools"],
    package_data={"ctmtab.tables": ["*.ctmt"]},
    include_package_data=False,  # else every file of the sdist in a package folder (C sources) rides along
    cmdclass={"build_py": BuildPy},
    ext_modules=cythonize([core], language_level=3),
)
