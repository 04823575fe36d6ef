"""Spec validation: every class of bad input named in the foundation issue gets one exact,
one-line message naming the key, the value and what is allowed (asserted by regex)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from qamsmith import ConstellationSpec, DemapperSpec, DesignSpec, MapperSpec, SpecError, derive
from qamsmith.spec import field_docs, parse_value


def _raises(pattern: str, build) -> SpecError:
    with pytest.raises(SpecError) as info:
        build()
    message = str(info.value)
    assert "\n" not in message
    assert re.fullmatch(pattern, message), message
    return info.value


def _spec(**sections) -> DesignSpec:
    kinds = {"constellation": ConstellationSpec, "mapper": MapperSpec, "demapper": DemapperSpec}
    return DesignSpec(**{k: kinds[k](**v) for k, v in sections.items()})


def _toml(tmp_path: Path, text: str, name: str = "spec.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


# --- constellation -----------------------------------------------------------------------

@pytest.mark.parametrize("order", [8, 32, 128, 512, 2048], ids=lambda o: f"qam{o}")
def test_non_square_order_is_refused_clearly(order: int) -> None:
    err = _raises(rf"constellation\.order = {order}: one of 2, 4, 16, 64, 256, 1024, 4096 "
                  r"\(non-square orders are not supported yet\)", lambda: _spec(constellation={"order": order}))
    assert err.key == "constellation.order" and err.value == order


@pytest.mark.parametrize("order", [0, 3, 100, 8192, "16"], ids=repr)
def test_unknown_order(order) -> None:
    _raises(rf"constellation\.order = {re.escape(repr(order))}: one of 2, 4, 16, 64, 256, 1024, 4096",
            lambda: _spec(constellation={"order": order}))


def test_unknown_labeling() -> None:
    _raises(r"constellation\.labeling = 'grey': one of gray, 3gpp-nr, ieee-802\.11, natural, table",
            lambda: _spec(constellation={"labeling": "grey"}))


def test_folded_is_refused_on_natural() -> None:
    spec = _spec(constellation={"labeling": "natural"}, demapper={"algorithm": "folded"})
    _raises(r"demapper\.algorithm = 'folded': maxlog or hard for labeling 'natural' at order 16 "
            r"\(folded needs a Gray-type product labeling\)", lambda: derive(spec))


def test_unknown_algorithm() -> None:
    _raises(r"demapper\.algorithm = 'logmap': one of maxlog, folded, hard", lambda: _spec(demapper={"algorithm": "logmap"}))


# --- unknown keys ------------------------------------------------------------------------

def test_unknown_toml_key_in_a_section(tmp_path: Path) -> None:
    path = _toml(tmp_path, "[mapper]\nwidht = 12\n")
    _raises(r"mapper\.widht = 12: a known key of \[mapper\]: width, scaling, fraction, backoff_db, rounding, "
            r"implementation, tables", lambda: DesignSpec.from_toml(path))


def test_unknown_top_level_toml_key(tmp_path: Path) -> None:
    path = _toml(tmp_path, 'name = "a"\n[pipeline]\nstages = 2\n')
    _raises(r"pipeline = \{'stages': 2\}: a known key: name, constellation, mapper, demapper, interface",
            lambda: DesignSpec.from_toml(path))


def test_unknown_dotted_setting() -> None:
    _raises(r"demapper\.llr_bits = 6: a known key of \[demapper\]: .*",
            lambda: DesignSpec().with_settings({"demapper.llr_bits": 6}))
    _raises(r"llr_width = 6: a key 'section\.field' with section one of constellation, mapper, demapper, interface",
            lambda: DesignSpec().with_settings({"llr_width": 6}))


def test_invalid_toml_syntax(tmp_path: Path) -> None:
    path = _toml(tmp_path, "[mapper\nwidth = 12\n")
    _raises(rf"spec = {re.escape(repr(str(path)))}: valid TOML \(.*\)", lambda: DesignSpec.from_toml(path))


# --- widths too small, with the minimum named --------------------------------------------

def test_demapper_input_too_narrow_names_the_minimum() -> None:
    # 256-QAM: outermost level 15 amplitude units at 2^4 codes each = 240 -> 9 bits signed
    spec = _spec(constellation={"order": 256}, demapper={"input_width": 8, "input_fraction": 4})
    _raises(r"demapper\.input_width = 8: at least 9 bits to hold the outermost level at input_fraction 4",
            lambda: derive(spec))
    derive(_spec(constellation={"order": 256}, demapper={"input_width": 9, "input_fraction": 4}))


def test_mapper_too_coarse_names_the_minimum_fraction() -> None:
    # 1024-QAM unit power: a level step is 2/sqrt(682) = 0.0766 normalized; at 2^-3 per LSB that is
    # 0.61 LSB (levels collide), at 2^-4 it is 1.22 LSB (distinct): the minimum is 4 fraction bits.
    spec = _spec(constellation={"order": 1024}, mapper={"width": 8, "fraction": 3})
    _raises(r"mapper\.fraction = 3: at least 4 fraction bits: mapper levels collide at this resolution",
            lambda: derive(spec))
    derive(_spec(constellation={"order": 1024}, mapper={"width": 8, "fraction": 4}))


def test_mapper_too_narrow_full_scale_names_the_minimum_width() -> None:
    spec = _spec(constellation={"order": 256}, mapper={"width": 4, "scaling": "full-scale"})
    err = _raises(r"mapper\.width = 4: at least (\d+) bits: mapper levels collide at this resolution",
                  lambda: derive(spec))
    minimum = int(re.search(r"at least (\d+)", str(err)).group(1))
    derive(_spec(constellation={"order": 256}, mapper={"width": minimum, "scaling": "full-scale"}))
    with pytest.raises(SpecError):
        derive(_spec(constellation={"order": 256}, mapper={"width": minimum - 1, "scaling": "full-scale"}))


def test_mapper_clipping_names_the_largest_fraction() -> None:
    # 64-QAM: outermost level 7/sqrt(42) = 1.080 normalized = 138 codes at 2^-7 per LSB, beyond 127
    spec = _spec(constellation={"order": 64}, mapper={"width": 8, "fraction": 7})
    _raises(r"mapper\.fraction = 7: the outermost level \(138\) exceeds the 8-bit output; "
            r"use mapper\.fraction <= 6 or a wider mapper\.width", lambda: derive(spec))
    derive(_spec(constellation={"order": 64}, mapper={"width": 8, "fraction": 6}))


def test_llr_width_below_two() -> None:
    _raises(r"demapper\.llr_width = 1: an integer from 2 to 32", lambda: _spec(demapper={"llr_width": 1}))


@pytest.mark.parametrize("section,key,width_key,width,value,hi", [
    ("mapper", "fraction", "width", 12, 12, 11),
    ("demapper", "input_fraction", "input_width", 12, 11, 10),
    ("demapper", "llr_fraction", "llr_width", 8, 8, 7),
    ("demapper", "llr_fraction", "llr_width", 8, -1, 7),
])
def test_fraction_outside_width(section: str, key: str, width_key: str, width: int, value: int, hi: int) -> None:
    _raises(rf"{section}\.{key} = {value}: an integer from 0 to {hi} \(fraction bits inside {section}\.{width_key}\)",
            lambda: _spec(**{section: {width_key: width, key: value}}))


def test_scale_fraction_outside_scale_width() -> None:
    _raises(r"demapper\.scale_fraction = 7: an integer from 0 to 6 \(fraction bits inside demapper\.scale_width\)",
            lambda: _spec(demapper={"scale_width": 6, "scale_fraction": 7}))


def test_full_scale_ignores_the_fraction_range() -> None:
    spec = _spec(mapper={"width": 8, "scaling": "full-scale"})      # default fraction 10 > width
    assert derive(spec).mapper_format.fraction == 0


# --- malformed label tables --------------------------------------------------------------

def _csv(tmp_path: Path, rows: list[str], header: bool = True) -> Path:
    return _toml(tmp_path, ("label,i,q\n" if header else "") + "\n".join(rows) + "\n", "table.csv")


def _table_spec(tmp_path: Path, csv: Path, order: int = 4) -> DesignSpec:
    path = _toml(tmp_path, f'[constellation]\norder = {order}\nlabeling = "table"\ntable_file = "{csv.name}"\n')
    spec = DesignSpec.from_toml(path)
    derive(spec)
    return spec


QPSK = ["0,-1,-1", "1,-1,1", "2,1,-1", "3,1,1"]


def test_table_duplicate_label(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK[:3] + ["2,1,1"])
    _raises(r"constellation\.table = 'label 2': each label exactly once \(duplicate label\)",
            lambda: _table_spec(tmp_path, csv))


def test_table_wrong_count(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK[:3])
    _raises(r"constellation\.table = '3 rows': exactly 4 rows \(one per label\) for order 4",
            lambda: _table_spec(tmp_path, csv))


def test_table_missing_label(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK[:3] + ["7,1,1"])
    _raises(r"constellation\.table = 'label 3 missing': labels 0\.\.3, each once", lambda: _table_spec(tmp_path, csv))


def test_table_non_numeric(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK[:3] + ["3,one,1"])
    _raises(rf"constellation\.table_file = '{re.escape(str(csv))}:5: 3,one,1': an integer label and numeric i, q",
            lambda: _table_spec(tmp_path, csv))


def test_table_wrong_columns(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK[:3] + ["3,1"])
    _raises(rf"constellation\.table_file = '{re.escape(str(csv))}:5: 3,1': three columns label,i,q",
            lambda: _table_spec(tmp_path, csv))


def test_table_repeated_point(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK[:3] + ["3,1,-1"])
    _raises(r"constellation\.table = 'repeated point': distinct points, one per label", lambda: _table_spec(tmp_path, csv))


def test_inline_table_non_numeric(tmp_path: Path) -> None:
    path = _toml(tmp_path, '[constellation]\norder = 4\nlabeling = "table"\n'
                           'table = [[0, -1, -1], [1, -1, 1], [2, 1, -1], [3, "1", 1]]\n')
    _raises(r"constellation\.table = \[3, '1', 1\]: rows \[label, i, q\] with an integer label and numeric i, q",
            lambda: DesignSpec.from_toml(path))


def test_missing_table_file(tmp_path: Path) -> None:
    path = _toml(tmp_path, '[constellation]\norder = 4\nlabeling = "table"\ntable_file = "nope.csv"\n')
    _raises(rf"constellation\.table_file = '{re.escape(str(tmp_path / 'nope.csv'))}': a readable CSV file \(.*\)",
            lambda: DesignSpec.from_toml(path))


def test_table_without_rows() -> None:
    _raises(r"constellation\.table = \(\): rows \[label, i, q\] \(or table_file\) when labeling = 'table'",
            lambda: _spec(constellation={"labeling": "table"}))


# --- the spec object itself --------------------------------------------------------------

def test_every_field_has_a_doc_and_the_dict_round_trips() -> None:
    docs = field_docs()
    spec = DesignSpec()
    flat = {f"{s}.{k}" for s, v in spec.to_dict().items() if isinstance(v, dict) for k in v} | {"name"}
    assert set(docs) == flat
    assert all(doc.strip() and "\n" not in doc for doc in docs.values())
    assert DesignSpec.from_dict(spec.to_dict()) == spec


def test_toml_flags_and_python_build_the_same_spec(tmp_path: Path) -> None:
    path = _toml(tmp_path, 'name = "x"\n[constellation]\norder = 64\n[demapper]\nllr_width = 6\n')
    from_python = DesignSpec(name="x", constellation=ConstellationSpec(order=64), demapper=DemapperSpec(llr_width=6))
    from_flags = DesignSpec().with_settings({"name": "x", "constellation.order": 64, "demapper.llr_width": 6})
    assert DesignSpec.from_toml(path) == from_python == from_flags
    assert hash(from_python) == hash(from_flags)


def test_parse_value_uses_toml_syntax() -> None:
    assert parse_value("12") == 12 and parse_value("1.5") == 1.5 and parse_value("true") is True
    assert parse_value('"gray"') == "gray" and parse_value("full-scale") == "full-scale"


def test_bad_name() -> None:
    _raises(r"name = 'Bad Name': lower-case letters, digits, '-' or '_', starting with a letter, at most 48",
            lambda: DesignSpec(name="Bad Name"))
