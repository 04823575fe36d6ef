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
def test_odd_bit_orders_are_accepted(order: int) -> None:
    """Odd-bit orders (rectangular by default, cross with constellation.shape; tests/test_cross.py)."""
    assert _spec(constellation={"order": order}).constellation.shape == "rectangular"


@pytest.mark.parametrize("order", [0, 3, 100, 8192, "16"], ids=repr)
def test_unknown_order(order) -> None:
    _raises(rf"constellation\.order = {re.escape(repr(order))}: one of 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096",
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
    _raises(r"demapper\.input_width = 8: at least 9 bits to hold the outermost level at input_fraction 4 "
            r"\(or demapper\.input_fraction <= 3\)", lambda: derive(spec))
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
            r"use mapper\.fraction <= 6 or mapper\.width >= 9", lambda: derive(spec))
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
    _raises(r"constellation\.table_file = 'label 2': each label exactly once \(duplicate label\)",
            lambda: _table_spec(tmp_path, csv))


def test_table_wrong_count(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK[:3])
    _raises(r"constellation\.table_file = '3 rows': exactly 4 rows \(one per label\) for order 4",
            lambda: _table_spec(tmp_path, csv))


def test_table_missing_label(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK[:3] + ["7,1,1"])
    _raises(r"constellation\.table_file = 'label 3 missing': labels 0\.\.3, each once", lambda: _table_spec(tmp_path, csv))


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
    _raises(r"constellation\.table_file = 'repeated point': distinct points, one per label", lambda: _table_spec(tmp_path, csv))


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
    # constellation.shape is written out for odd-bit orders only (tests/test_cross.py), constellation.orders
    # and interface.lanes only when set (tests/test_modes.py)
    flat = {f"{s}.{k}" for s, v in spec.to_dict().items() if isinstance(v, dict) for k in v} | {
        "name", "constellation.shape", "constellation.orders", "interface.lanes"}
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


# --- bad input found by the fuzzer (tests/test_fuzz.py): one line naming the key the user set -------

def test_float_order_is_refused_with_its_integer() -> None:
    """TOML `order = 16.0` is a float (16.0 == 16 in Python): refused, not a traceback in bit_length."""
    message = r"constellation\.order = 16\.0: one of 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096 \(an integer: 16, not 16\.0\)"
    _raises(message, lambda: DesignSpec.from_dict({"constellation": {"order": 16.0}}))
    _raises(message, lambda: DesignSpec().with_settings({"constellation.order": parse_value("16.0")}))
    _raises(r"mapper\.width = 12\.0: an integer from 2 to 20 \(an integer: 12, not 12\.0\)",
            lambda: DesignSpec.from_dict({"mapper": {"width": 12.0}}))


@pytest.mark.parametrize("table", ["5", "1.5", '"rows"', "{ a = 1 }"])
def test_table_that_is_not_an_array(tmp_path: Path, table: str) -> None:
    path = _toml(tmp_path, f'[constellation]\nlabeling = "table"\ntable = {table}\n')
    shown = {"5": "5", "1.5": "1.5", '"rows"': "'rows'", "{ a = 1 }": "{'a': 1}"}[table]
    _raises(rf"constellation\.table = {re.escape(shown)}: an array of rows \[label, i, q\]",
            lambda: DesignSpec.from_toml(path))


@pytest.mark.parametrize("key,allowed", [("mapper.backoff_db", "a number of dB from 0 to 40"),
                                         ("interface.target_mhz", r"0 \(off\) or a clock from 1 to 1000 MHz")])
def test_number_of_400_digits_for_a_float_key(tmp_path: Path, key: str, allowed: str) -> None:
    """A 400-digit integer does not fit a float: it is refused as the integer it is, shown cut."""
    section, name = key.split(".")
    path = _toml(tmp_path, f"[{section}]\n{name} = {'9' * 400}\n")
    _raises(rf"{re.escape(key)} = 9999999999999999… \(400 digits\): {allowed}", lambda: DesignSpec.from_toml(path))
    _raises(rf"{re.escape(key)} = 1000000000000000… \(401 digits\): {allowed}",
            lambda: DesignSpec().with_settings({key: 10 ** 400}))


def test_table_row_beyond_a_float(tmp_path: Path) -> None:
    rows = ", ".join(["[1, -1, 1]", "[2, 1, -1]", "[3, 1, 1]"])
    path = _toml(tmp_path, f'[constellation]\norder = 4\nlabeling = "table"\ntable = [[0, 1e400, 1], {rows}]\n')
    _raises(r"constellation\.table = \[0, inf, 1\]: finite i, q \(at most 1\.8e308 in magnitude\)",
            lambda: DesignSpec.from_toml(path))
    path = _toml(tmp_path, f'[constellation]\norder = 4\nlabeling = "table"\ntable = [[0, 1{"0" * 400}, 1], {rows}]\n')
    _raises(r"constellation\.table = \[0, 1000000000000000…, 1\] \(3 items\): finite i, q \(at most 1\.8e308 in magnitude\)",
            lambda: DesignSpec.from_toml(path))


def test_table_with_huge_but_finite_points_is_scaled_without_overflow() -> None:
    """1e300 squares to inf: the table is scaled by its peak before its energy is taken."""
    rows = ((0, -1e300, -1e300), (1, -1e300, 1e300), (2, 1e300, -1e300), (3, 1e300, 1e300))
    spec = DesignSpec(constellation=ConstellationSpec(order=4, labeling="table", table=rows))
    assert derive(spec).constellation.axes is not None           # the QPSK grid, found again
    far = ((0, 1e300, 1.0), (1, -1.0, 1.0), (2, 1.0, -1.0), (3, -1.0, -1.0))
    _raises(r"constellation\.table = '4 rows': mapper levels collide at every fraction a 20-bit mapper\.width holds "
            r"\(points too close together for the outermost one\)",
            lambda: derive(DesignSpec(constellation=ConstellationSpec(order=4, labeling="table", table=far),
                                      given=frozenset({"constellation.table"}))))


def test_integer_of_5000_digits(tmp_path: Path) -> None:
    """Python refuses to convert an integer of more than 4,300 digits; the spec names the key that holds it."""
    path = _toml(tmp_path, f"[mapper]\nwidth = {'9' * 5000}\n")
    message = r"mapper\.width = 9999999999999999… \(5000 digits\): an integer from 2 to 20"
    _raises(message, lambda: DesignSpec.from_toml(path))
    _raises(message, lambda: DesignSpec().with_settings({"mapper.width": parse_value("9" * 5000, key="mapper.width")}))


def test_array_nested_3000_deep(tmp_path: Path) -> None:
    path = _toml(tmp_path, f"[mapper]\nwidth = {'[' * 3000}{']' * 3000}\n")
    message = r"mapper\.width = \[\[\[\[\[…\]\]\]\]\] \(1 item, nested 3000 deep\): an integer from 2 to 20"
    _raises(message, lambda: DesignSpec.from_toml(path))
    value = parse_value("[" * 3000 + "]" * 3000, key="mapper.width")
    _raises(message, lambda: DesignSpec().with_settings({"mapper.width": value}))


def test_nesting_beyond_what_is_parsed() -> None:
    _raises(r"mapper\.width = '\[\[\[\[.*'… \(100000 characters\): values nested at most 10000 deep and integers "
            r"of at most 100000 digits", lambda: parse_value("[" * 50000 + "]" * 50000, key="mapper.width"))


def test_spec_file_that_is_not_utf8(tmp_path: Path) -> None:
    path = tmp_path / "spec.toml"
    path.write_bytes(b"[mapper]\nwidth = 12 # \xff\xfe\n")
    _raises(rf"spec = {re.escape(repr(str(path)))}: a UTF-8 text file \(byte 0xff on line 2 is not UTF-8\)",
            lambda: DesignSpec.from_toml(path))


def test_table_file_that_is_not_utf8(tmp_path: Path) -> None:
    csv = tmp_path / "table.csv"
    csv.write_bytes("0,-1,-1\n1,-1,1\n2,1,-1\n3,1,1 # caf\u00e9\n".encode("latin-1"))
    _raises(rf"constellation\.table_file = {re.escape(repr(str(csv)))}: a UTF-8 text file \(byte 0xe9 on line 4 "
            r"is not UTF-8\)", lambda: _table_spec(tmp_path, csv))


def test_long_values_are_cut_in_the_message() -> None:
    _raises(r"name = 'xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx'… \(5000 characters\): lower-case .*",
            lambda: DesignSpec(name="x" * 5000))
    _raises(r"mapper\.widht = 1: a known key of \[mapper\]: .*", lambda: DesignSpec().with_settings({"mapper.widht": 1}))
    _raises(r"mapper\.'a b' = 1: a known key of \[mapper\]: .*", lambda: DesignSpec().with_settings({"mapper.a b": 1}))


# --- a refusal names a key the user set, with the value that would fit ---------------------------

def test_mapper_width_alone_is_named_with_the_width_the_default_fraction_needs() -> None:
    """--mapper-width 2: the default mapper.fraction 10 does not fit, and the user never wrote it."""
    _raises(r"mapper\.width = 2: at least 11 bits for mapper\.fraction = 10 \(the default\), or set a smaller "
            r"mapper\.fraction", lambda: DesignSpec().with_settings({"mapper.width": 2}))
    # 64-QAM's outermost level is 1.08 normalized: 1106 codes at 2^-10, 12 bits
    _raises(r"mapper\.width = 10: at least 12 bits for mapper\.fraction = 10 \(the default\), or set a smaller "
            r"mapper\.fraction", lambda: DesignSpec().with_settings({"constellation.order": 64, "mapper.width": 10}))
    spec = DesignSpec().with_settings({"constellation.order": 64, "mapper.width": 11})
    _raises(r"mapper\.width = 11: at least 12 bits for the outermost level \(1106\) at mapper\.fraction = 10 "
            r"\(the default\), or set mapper\.fraction <= 9", lambda: derive(spec))
    derive(DesignSpec().with_settings({"constellation.order": 64, "mapper.width": 12}))
    # both written: the fraction is named, as before
    _raises(r"mapper\.fraction = 10: an integer from 0 to 1 \(fraction bits inside mapper\.width\)",
            lambda: DesignSpec().with_settings({"mapper.width": 2, "mapper.fraction": 10}))


def test_input_width_alone_is_named_with_the_width_the_default_fraction_needs() -> None:
    """--input-width 4 --order 64: 7 levels << 4 = 112 needs 8 bits; fraction 0 fits 4 bits."""
    _raises(r"demapper\.input_width = 4: at least 8 bits for demapper\.input_fraction = 4 \(the default\), or set "
            r"demapper\.input_fraction <= 0",
            lambda: DesignSpec().with_settings({"constellation.order": 64, "demapper.input_width": 4}))
    derive(DesignSpec().with_settings({"constellation.order": 64, "demapper.input_width": 8}))
    derive(DesignSpec().with_settings({"constellation.order": 64, "demapper.input_width": 4, "demapper.input_fraction": 0}))
    _raises(r"demapper\.llr_width = 2: at least 3 bits for demapper\.llr_fraction = 2 \(the default\), or set "
            r"demapper\.llr_fraction <= 1", lambda: DesignSpec().with_settings({"demapper.llr_width": 2}))


def test_input_fraction_alone_is_named_with_the_fraction_that_fits() -> None:
    """4096-QAM: the outermost level 63 << 6 = 4032 needs 13 bits, beyond the default 12; 63 << 5 fits."""
    spec = DesignSpec().with_settings({"constellation.order": 4096, "demapper.input_fraction": 6})
    _raises(r"demapper\.input_fraction = 6: at most 5 to hold the outermost level \(63 amplitude units\) in "
            r"demapper\.input_width = 12 \(the default\), or set demapper\.input_width >= 13", lambda: derive(spec))


@pytest.mark.parametrize("order", [2, 4, 16, 64, 256, 1024, 4096], ids=lambda o: f"qam{o}")
@pytest.mark.parametrize("labeling", ["gray", "3gpp-nr", "natural"])
@pytest.mark.parametrize("rounding", ["half-even", "floor"])
def test_the_width_a_refusal_names_is_the_smallest_that_builds(order: int, labeling: str, rounding: str) -> None:
    base = {"constellation.order": order, "constellation.labeling": labeling, "mapper.rounding": rounding}
    err = _raises(r"mapper\.width = 2: at least (\d+) bits .*", lambda: DesignSpec().with_settings({**base, "mapper.width": 2}))
    need = int(re.search(r"at least (\d+)", str(err)).group(1))
    derive(DesignSpec().with_settings({**base, "mapper.width": need}))
    with pytest.raises(SpecError):
        derive(DesignSpec().with_settings({**base, "mapper.width": need - 1}))
    base = {"constellation.order": order, "constellation.labeling": labeling}
    err = _raises(r"demapper\.input_width = 2: at least (\d+) bits .*",
                  lambda: DesignSpec().with_settings({**base, "demapper.input_width": 2}))
    need = int(re.search(r"at least (\d+)", str(err)).group(1))
    derive(DesignSpec().with_settings({**base, "demapper.input_width": need}))
    with pytest.raises(SpecError):
        derive(DesignSpec().with_settings({**base, "demapper.input_width": need - 1}))


def test_table_csv_without_an_order_takes_the_row_count(tmp_path: Path) -> None:
    csv = _csv(tmp_path, QPSK)
    spec = DesignSpec().with_settings({"constellation.labeling": "table", "constellation.table_file": str(csv)})
    assert spec.constellation.order == 4 and derive(spec).constellation.order == 4
    path = _toml(tmp_path, f'[constellation]\nlabeling = "table"\ntable_file = "{csv.name}"\n')
    assert DesignSpec.from_toml(path).constellation.order == 4
    three = _toml(tmp_path, "\n".join(QPSK[:3]) + "\n", "three.csv")
    _raises(r"constellation\.table_file = '3 rows': one row per label: 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096 rows "
            r"\(constellation\.order, not set, is the number of rows\)",
            lambda: DesignSpec().with_settings({"constellation.labeling": "table", "constellation.table_file": str(three)}))
    # an order the user set is kept, and the table is named against it
    _raises(r"constellation\.table_file = '4 rows': exactly 16 rows \(one per label\) for order 16",
            lambda: derive(DesignSpec().with_settings({"constellation.order": 16, "constellation.labeling": "table",
                                                       "constellation.table_file": str(csv)})))


def test_labeling_table_without_rows_names_the_labeling() -> None:
    _raises(r"constellation\.labeling = 'table': rows in constellation\.table or a constellation\.table_file with it",
            lambda: DesignSpec().with_settings({"constellation.labeling": "table"}))


def test_table_far_point_names_the_table_and_what_fits() -> None:
    """A table whose outermost point needs more than the default mapper: named as the table, with the fix."""
    rows = tuple((n, 40.0 if n == 15 else float(2 * (n % 4) - 3), float(2 * (n // 4) - 3)) for n in range(16))
    spec = DesignSpec().with_settings({"constellation.labeling": "table", "constellation.table": rows})
    err = _raises(r"constellation\.table = '16 rows': the outermost level \((\d+)\) exceeds the 12-bit output at "
                  r"mapper\.fraction = 10 \(the default\): set mapper\.fraction <= (\d+) or mapper\.width >= (\d+)",
                  lambda: derive(spec))
    fraction, width = map(int, re.search(r"<= (\d+) or mapper\.width >= (\d+)", str(err)).groups())
    derive(spec.with_settings({"mapper.fraction": fraction}))
    derive(spec.with_settings({"mapper.width": width}))


def test_searched_table_collision_names_the_fraction_that_separates() -> None:
    """Points 0.1 apart (off the grid, searched): they collide on a coarse input grid."""
    rows = ((0, -1.0, -1.0), (1, -1.0, 1.0), (2, 1.0, -1.0), (3, 1.0, -0.9))
    spec = DesignSpec().with_settings({"constellation.order": 4, "constellation.labeling": "table",
                                       "constellation.table": rows, "demapper.input_fraction": 1})
    err = _raises(r"demapper\.input_fraction = 1: at least (\d+) fraction bits: the table's points collide on the "
                  r"input grid", lambda: derive(spec))
    derive(spec.with_settings({"demapper.input_fraction": int(re.search(r"at least (\d+)", str(err)).group(1))}))
    # a width alone: for a table, the static rule (fraction bits inside the width) gives the bound
    _raises(r"demapper\.input_width = 4: at least 6 bits for demapper\.input_fraction = 4 \(the default\), or set "
            r"demapper\.input_fraction <= 2",
            lambda: DesignSpec().with_settings({"constellation.order": 4, "constellation.labeling": "table",
                                                "constellation.table": rows, "demapper.input_width": 4}))


def test_what_the_user_wrote_is_not_part_of_the_spec(tmp_path: Path) -> None:
    path = _toml(tmp_path, "[mapper]\nwidth = 12\n")
    from_file = DesignSpec.from_toml(path)
    assert from_file.given == frozenset({"mapper.width"})
    assert from_file == DesignSpec() and hash(from_file) == hash(DesignSpec()) and repr(from_file) == repr(DesignSpec())
    assert from_file.with_settings({"demapper.llr_width": 6}).given == frozenset({"mapper.width", "demapper.llr_width"})
    # every key of the resolved spec (constellation.shape only for odd-bit orders)
    assert DesignSpec.from_dict(from_file.to_dict()).given == frozenset(field_docs()) - {
        "constellation.shape", "constellation.orders", "interface.lanes"}
