"""Build the optional C accelerator; without a compiler the package installs and runs in pure Python."""

from setuptools import Extension, setup

setup(ext_modules=[Extension("normalise._pyliteral", ["normalise/_ext/pyliteral.c"], optional=True)])
