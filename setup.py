"""Build step for the compiled chemistry kernel; everything else is in pyproject.toml.

The extension is optional: where no C compiler is found the install still succeeds and
chemistry.solver uses its numpy path (the same results, several times slower on large arrays).
"""

from setuptools import Extension, setup

setup(
    ext_modules=[
        Extension(
            "chemistry._kernel",
            sources=["chemistry/_kernel.c"],
            # IEEE rounding kept (no -ffast-math); errno-free maths lets exp/log vectorise.
            extra_compile_args=["-O3", "-fno-math-errno", "-fno-trapping-math"],
            libraries=["m", "pthread"],
            optional=True,
        )
    ]
)
