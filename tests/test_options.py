"""One definition per analysis option: the CLI flag, the API keyword and the
TOML key are generated from skelmorph.options.ANALYZE_OPTIONS and agree."""

import inspect

import pytest

import skelmorph as sm
from skelmorph.cli import _parser, main
from skelmorph.cohort.run import load_options
from skelmorph.errors import SkelmorphError
from skelmorph.options import ANALYZE_OPTIONS, options_from_cli, validate_options

NOT_OPTIONS = {"image", "spacing", "unit", "out", "progress", "workers", "scheduler"}


def _analyze_flags():
    parser = _parser()
    sub = next(a for a in parser._actions if a.dest == "command").choices["analyze"]
    return {a.dest: a for a in sub._actions}


def test_api_keywords_are_the_options_with_the_same_defaults():
    params = inspect.signature(sm.analyze).parameters
    assert set(params) - NOT_OPTIONS == {o.name for o in ANALYZE_OPTIONS}
    for o in ANALYZE_OPTIONS:
        assert params[o.name].default == o.default, o.name


def test_cli_flags_are_the_options_with_dashes():
    flags = _analyze_flags()
    for o in ANALYZE_OPTIONS:
        action = flags[o.name]
        assert o.flag in action.option_strings, o.name
        assert action.default == o.default, o.name
    args = _parser().parse_args(["analyze", "x.tif"])
    assert options_from_cli(args) == {o.name: o.default for o in ANALYZE_OPTIONS}


def test_toml_keys_are_the_options(tmp_path):
    f = tmp_path / "o.toml"
    f.write_text("\n".join(f"{o.name} = {_toml(o.default)}" for o in ANALYZE_OPTIONS
                           if o.default is not None))
    got = load_options(f)
    assert got == {o.name: o.default for o in ANALYZE_OPTIONS if o.default is not None}
    f.write_text("n_trees = 2\nradii = 3\n")
    with pytest.raises(SkelmorphError, match="unknown option 'radii'"):
        load_options(f)


def _toml(v):
    return {True: "true", False: "false"}.get(v, repr(v)) if isinstance(v, bool) else repr(v)


def test_cli_values_pass_the_same_checks():
    args = _parser().parse_args(["analyze", "x.tif", "--n-trees", "3", "--tree", "random",
                                 "--no-prune", "--hysteresis", "0.2", "0.5", "--channel", "1",
                                 "--max-paths", "2e7", "--measures", "bone", "vessel"])
    opts = options_from_cli(args)
    assert opts["n_trees"] == 3 and opts["prune"] is False and opts["channel"] == 1
    assert opts["hysteresis"] == (0.2, 0.5) and opts["max_paths"] == 20_000_000
    assert validate_options(opts) is opts


def test_bad_cli_values_exit_2_naming_the_flag(tmp_path, capsys):
    assert main(["analyze", str(tmp_path / "x.tif"), "--hysteresis", "0.2"]) == 2
    assert "--hysteresis takes 'auto' or two levels" in capsys.readouterr().err
    assert main(["analyze", str(tmp_path / "x.tif"), "--channel", "red"]) == 2
    assert "--channel must be an index or 'grey'" in capsys.readouterr().err
