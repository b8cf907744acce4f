"""Build the Cython example against an installed globemill (its libglobemill and header).

    GLOBEMILL_ROOT=/path/to/site-packages/globemill python setup.py build_ext --inplace

GLOBEMILL_ROOT is the folder holding libglobemill (the installed globemill package, the folder of
globemill._core);
GLOBEMILL_INCLUDE (default: GLOBEMILL_ROOT/include) the folder holding globemill.h.
"""

import os

from Cython.Build import cythonize
from setuptools import Extension, setup

root = os.environ["GLOBEMILL_ROOT"]
include = os.environ.get("GLOBEMILL_INCLUDE", os.path.join(root, "include"))
ext = Extension(
    "globemill_cy",
    ["globemill_cy.pyx"],
    include_dirs=[include],
    library_dirs=[root],
    libraries=["globemill"],
    runtime_library_dirs=[root],
)
setup(name="globemill-cython-example", ext_modules=cythonize([ext], language_level=3))
