"""A resumed run keeps the schedule it began with unless the command line gives another."""

from __future__ import annotations

import argparse

from sequencer.cli.runcmd import manifest_extras, repeat_for
from sequencer.recipe.repeat import Repeat
from sequencer.store.runfolder import write_manifest
from tests.store.conftest import load, write_recipe


def test_a_resume_without_options_keeps_the_schedule_the_run_began_with(tmp_path):
    """An overnight run of 8 rounds, resumed after a crash with `--resume --out DIR` only, used
    to finish the pass in flight and stop: the schedule came from the command line alone."""
    recipe = load(write_recipe(tmp_path / "recipes", channels=2))
    began = Repeat(600.0, None, 8)
    folder = tmp_path / "run"
    folder.mkdir()
    write_manifest(folder, {"status": "running", **manifest_extras(recipe, "sim", began)})
    options = {"every": None, "for_": None, "rounds": None, "resume": True, "out": folder}
    assert repeat_for(recipe, argparse.Namespace(**options)) == began
    given = argparse.Namespace(**{**options, "rounds": 3})
    assert repeat_for(recipe, given) == Repeat(0.0, None, 3)  # the command line still decides
    fresh = argparse.Namespace(**{**options, "resume": False})
    assert repeat_for(recipe, fresh) == recipe.repeat
