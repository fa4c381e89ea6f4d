"""Config files: the shipped ones parse, bad ones are refused in one line naming file and key."""

from __future__ import annotations

import dataclasses
import sys
from collections.abc import Mapping
from importlib import resources
from pathlib import Path

import pytest

from vinstrata.config import (
    SCHEMA,
    Columns,
    Config,
    LimitSet,
    load_config,
    packaged_config,
    parse_config,
    section_of,
)
from vinstrata.errors import InputError
from vinstrata.place.limits import MARKETS, limit_set

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"
PACKAGED = ROOT / "src" / "vinstrata" / "configs"

MINIMAL = '[columns]\nlot_id = "lot"\n'
LOTS = "lot,grade,alcohol,ph\nT-001,15,12.5,3.4\nT-002,14,13.0,3.5\n"


def write(tmp_path: Path, text: str, name: str = "bad.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


# --------------------------------------------------------------------------- shipped configs


def test_default_config_parses():
    config = load_config(CONFIGS / "default.toml")
    assert isinstance(config, Config)
    assert config.columns.lot_id == "lot"
    assert config.bands.cuts == (14.0, 16.0)
    assert config.bands.labels == ("bottom", "middle", "top")
    assert config.ingest.censored == "half_limit"
    assert config.ingest.max_missing_share == 0.25
    assert set(config.limits.overrides) == {"eu", "oiv", "us"}


def test_demo_config_parses():
    config = load_config(CONFIGS / "demo.toml")
    assert config.columns.analytes == (
        "alcohol", "residual_sugar", "titratable_acidity", "volatile_acidity", "ph",
        "free_so2", "total_so2", "malic_acid", "lactic_acid", "potassium",
        "total_phenolics", "colour_intensity", "density")
    assert config.columns.passthrough == ("vintage", "colour")
    assert config.units["titratable_acidity"] == "g/L tartaric"
    assert config.limits.colour_column == "colour"


def test_packaged_configs_equal_the_files():
    for name in ("default", "demo"):
        from_file = load_config(CONFIGS / f"{name}.toml")
        packaged = packaged_config(name)
        assert dataclasses.replace(from_file, source="") == dataclasses.replace(packaged,
                                                                                source="")
    assert dataclasses.replace(load_config(None), source="") == dataclasses.replace(
        packaged_config("default"), source="")


def test_shipped_configs_are_byte_identical_to_the_package_copies():
    shipped = sorted(p.name for p in CONFIGS.glob("*.toml"))
    packaged = sorted(p.name for p in PACKAGED.glob("*.toml"))
    assert shipped == packaged == ["default.toml", "demo.toml"]
    for name in shipped:
        assert (CONFIGS / name).read_bytes() == (PACKAGED / name).read_bytes(), name
        installed = resources.files("vinstrata").joinpath(f"configs/{name}").read_bytes()
        assert installed == (CONFIGS / name).read_bytes(), name


def test_keys_left_out_take_the_defaults_documented_in_default_toml():
    # default.toml: "every key, its default and what it does"; a copy keeping only what it
    # changes must behave like the full file ([columns] holds file-specific examples)
    documented = load_config(CONFIGS / "default.toml")
    minimal = parse_config({"columns": {"lot_id": "lot"}}, "minimal.toml")
    for field in dataclasses.fields(Config):
        if field.name in ("columns", "source", "limits"):
            continue
        assert getattr(minimal, field.name) == getattr(documented, field.name), field.name
    # the [limits.<market>] tables written out equal the built-in market values
    for market in ("eu", "oiv", "us"):
        ours, theirs = (limit_set(dataclasses.replace(c.limits, market=market))
                        for c in (minimal, documented))
        assert ours == theirs, market
    assert dataclasses.replace(minimal.limits, overrides={}) == dataclasses.replace(
        documented.limits, overrides={})


# tables whose keys the user names (analytes), not the config
OPEN_TABLES = {"units", "kinds", "bounds", "segment.transforms"}
# the packaged default is also the config of a run without --config: it names the usual columns
EXAMPLES = {"columns.lot_id", "columns.grade"}


def _written_keys(raw: dict, prefix: str = "") -> set[str]:
    """The dotted keys a TOML document sets."""
    out = set()
    for key, value in raw.items():
        name = prefix + key
        if isinstance(value, dict) and name not in OPEN_TABLES:
            out |= _written_keys(value, name + ".")
        else:
            out.add(name)
    return out


def _declared_keys() -> set[str]:
    """The dotted keys the dataclasses declare."""
    top = {f.name for f in dataclasses.fields(Config)} - {"source"} - set(SCHEMA)
    sections = {f"{name}.{key}" for name, (_, checks, _) in SCHEMA.items() for key in checks}
    markets = {f"limits.{market}.{key}" for market in MARKETS
               for key in section_of(LimitSet).checks}
    return top | sections | markets


def _value(config: Config, key: str) -> object:
    value = config
    for part in key.split("."):
        value = value[part] if isinstance(value, Mapping) else getattr(value, part)
    return value


def test_config_files_hold_every_declared_key_with_its_default():
    # a key is declared once, as a field of its dataclass; default.toml writes out every
    # key with exactly that default (same type too: the config is hashed with the model),
    # demo.toml only keys that exist, and the package ships the same files
    for name in ("default.toml", "demo.toml"):
        assert (PACKAGED / name).read_bytes() == (CONFIGS / name).read_bytes(), name
    declared = _declared_keys()
    default_raw = tomllib.loads((CONFIGS / "default.toml").read_text("utf-8"))
    demo_raw = tomllib.loads((CONFIGS / "demo.toml").read_text("utf-8"))
    written = _written_keys(default_raw)
    assert written == declared, ("missing", declared - written, "unknown", written - declared)
    assert _written_keys(demo_raw) <= declared, _written_keys(demo_raw) - declared

    documented = load_config(CONFIGS / "default.toml")
    built_in = Config(columns=Columns(lot_id="lot"))
    for key in sorted(declared - EXAMPLES):
        if key.startswith(tuple(f"limits.{market}." for market in MARKETS)):
            _, market, name = key.split(".")
            expected = getattr(MARKETS[market], name)
            assert repr(documented.limits.overrides[market][name]) == repr(expected), key
        else:
            assert repr(_value(documented, key)) == repr(_value(built_in, key)), key
    for key in EXAMPLES:
        assert isinstance(_value(documented, key), str), key


# --------------------------------------------------------------------------- refusals


BAD = {
    "missing_lot_id": ('[columns]\ngrade = "grade"\n', "columns.lot_id", "required"),
    "no_columns": ('seed = 3\n', "columns", "[columns]"),
    "unknown_section": (MINIMAL + "[colums]\nlot_id = 'x'\n", "colums", "unknown key"),
    "unknown_key": (MINIMAL + '[ingest]\ndelimeter = ","\n', "ingest.delimeter", "unknown key"),
    "unknown_top_key": ("sead = 3\n" + MINIMAL, "sead", "unknown key"),
    "lot_id_number": ("[columns]\nlot_id = 5\n", "columns.lot_id", "a string"),
    "analytes_string": (MINIMAL + 'analytes = "alcohol"\n', "columns.analytes",
                        "a list of strings"),
    "bootstrap_text": (MINIMAL + '[profile]\nbootstrap = "many"\n', "profile.bootstrap",
                       "an integer"),
    "bootstrap_float": (MINIMAL + "[profile]\nbootstrap = 2000.5\n", "profile.bootstrap",
                        "an integer"),
    "components_bool": (MINIMAL + "[segment]\ncomponents = true\n", "segment.components",
                        "an integer"),
    "share_too_big": (MINIMAL + "[ingest]\nmax_missing_share = 1.5\n",
                      "ingest.max_missing_share", "between 0 and 1"),
    "share_nan": (MINIMAL + "[ingest]\nmax_missing_share = nan\n", "ingest.max_missing_share",
                  "a finite number"),
    "censored_choice": (MINIMAL + '[ingest]\ncensored = "zero"\n', "ingest.censored",
                        '"half_limit"'),
    "include_unassigned": (MINIMAL + '[profile]\ninclude_unassigned = "yes"\n',
                           "profile.include_unassigned", "true or false"),
    "seed_text": ('seed = "abc"\n' + MINIMAL, "seed", "an integer"),
    "bounds_pair": (MINIMAL + "[bounds]\nproline = [5000]\n", "bounds.proline", "[low, high]"),
    "ingest_not_table": (MINIMAL.replace("[columns]", 'ingest = 3\n[columns]'), "ingest",
                         "a table"),
    "market_unknown_key": (MINIMAL + "[limits.eu]\nva_max = 1.2\n", "limits.eu.va_max",
                           "unknown key"),
    "lot_id_blank": ('[columns]\nlot_id = " "\n', "columns.lot_id", "a column name"),
    "named_twice": (MINIMAL + 'grade = "lot"\n', "columns", "once"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_config_is_refused_naming_file_key_and_expectation(tmp_path, case):
    text, key, expected = BAD[case]
    path = write(tmp_path, text)
    with pytest.raises(InputError) as err:
        load_config(path)
    message = str(err.value)
    assert "\n" not in message
    assert message.startswith(str(path))
    assert f"'{key}'" in message, message
    assert expected in message, message


@pytest.mark.parametrize("case", ["missing_lot_id", "unknown_key", "bootstrap_text",
                                  "share_too_big", "lot_id_number"])
def test_bad_config_through_the_cli_exits_2_with_one_line(tmp_path, run_cli, case):
    text, key, expected = BAD[case]
    path = write(tmp_path, text)
    (tmp_path / "lots.csv").write_text(LOTS, encoding="utf-8")
    result = run_cli("check", tmp_path / "lots.csv", "--config", path, "--out", tmp_path / "o")
    assert result.code == 2, result
    lines = result.err.strip().splitlines()
    assert len(lines) == 1, result
    assert lines[0].startswith("error:")
    assert "bad.toml" in lines[0] and f"'{key}'" in lines[0] and expected in lines[0]
    assert "Traceback" not in result.err
    assert not (tmp_path / "o").exists()


def test_invalid_toml_is_refused_in_one_line(tmp_path, run_cli):
    path = write(tmp_path, '[columns\nlot_id = "lot"\n')
    with pytest.raises(InputError, match="not valid TOML"):
        load_config(path)
    (tmp_path / "lots.csv").write_text(LOTS, encoding="utf-8")
    result = run_cli("check", tmp_path / "lots.csv", "--config", path, "--out", tmp_path / "o")
    assert result.code == 2 and result.err.startswith("error:") and "bad.toml" in result.err
    assert len(result.err.strip().splitlines()) == 1


def test_missing_config_file_is_refused(tmp_path, run_cli):
    (tmp_path / "lots.csv").write_text(LOTS, encoding="utf-8")
    result = run_cli("check", tmp_path / "lots.csv", "--config", tmp_path / "none.toml",
                     "--out", tmp_path / "o")
    # click checks the path given on the command line, with its own usage error
    assert result.code == 2
    assert "Invalid value for '--config'" in result.err and "none.toml" in result.err
    with pytest.raises(InputError, match=r"none\.toml: config file not found"):
        load_config(tmp_path / "none.toml")


def test_wrong_type_inside_units_names_the_analyte(tmp_path):
    path = write(tmp_path, MINIMAL + "[units]\nalcohol = 5\n")
    with pytest.raises(InputError) as err:
        load_config(path)
    message = str(err.value)
    assert "bad.toml" in message and "'units.alcohol'" in message
    assert "a string" in message


def test_config_with_a_byte_order_mark_reads(tmp_path):
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + MINIMAL.encode("utf-8"))
    assert load_config(path).columns.lot_id == "lot"


# --------------------------------------------------------------------------- bands


@pytest.mark.parametrize("cuts", ["[16.0, 14.0]", "[14.0, 14.0]", "[12.0, 16.0, 14.0]"])
def test_band_cuts_must_ascend(tmp_path, cuts):
    n = cuts.count(",") + 1
    labels = ", ".join(f'"b{i}"' for i in range(n + 1))
    quantiles = ", ".join(f"{(i + 1) / (n + 1):.2f}" for i in range(n))
    path = write(tmp_path, MINIMAL + f"[bands]\ncuts = {cuts}\nlabels = [{labels}]\n"
                 f"quantiles = [{quantiles}]\n")
    with pytest.raises(InputError) as err:
        load_config(path)
    assert "'bands.cuts'" in str(err.value) and "ascending" in str(err.value)


@pytest.mark.parametrize("labels", ['["low", "high"]', '["a", "b", "c", "d"]'])
def test_band_labels_are_one_more_than_cuts(tmp_path, labels):
    path = write(tmp_path, MINIMAL + f"[bands]\ncuts = [14.0, 16.0]\nlabels = {labels}\n")
    with pytest.raises(InputError) as err:
        load_config(path)
    assert "'bands.labels'" in str(err.value) and "3 names" in str(err.value)


def test_band_labels_must_differ(tmp_path):
    path = write(tmp_path, MINIMAL + '[bands]\nlabels = ["low", "mid", "low"]\n')
    with pytest.raises(InputError, match=r"'bands\.labels'.*distinct"):
        load_config(path)


def test_three_cuts_four_labels_accepted(tmp_path):
    path = write(tmp_path, MINIMAL + '[bands]\ncuts = [12.0, 14.0, 16.0]\n'
                 'labels = ["poor", "fair", "good", "fine"]\nquantiles = [0.2, 0.5, 0.8]\n')
    bands = load_config(path).bands
    assert bands.cuts == (12.0, 14.0, 16.0)
    assert bands.labels == ("poor", "fair", "good", "fine")


def test_two_global_bands_need_no_quantiles(tmp_path):
    # default.toml: quantiles are "used with mode = style_quantile"; global cuts alone
    # (one cut, two labels) must be enough
    path = write(tmp_path, MINIMAL + '[bands]\ncuts = [15.0]\nlabels = ["lower", "upper"]\n')
    bands = load_config(path).bands
    assert bands.cuts == (15.0,) and bands.labels == ("lower", "upper")
    assert bands.mode == "global"
