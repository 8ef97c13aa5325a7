"""Package list for setuptools: the core lives in src/, the stage folders keep the top level."""

from setuptools import find_packages, setup

STAGE_FOLDERS = ["demandprep.flows", "demandprep.schemas", "demandprep.sql"]

setup(packages=find_packages("src") + STAGE_FOLDERS)
