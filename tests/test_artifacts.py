"""Artifacts: the manifest, ROM images and vectors checked against outside formulas, and the
ownership rules and atomicity of `write_design`.

Outside sources, named beside each check:
- 3GPP TS 38.211 section 5.1.7 (256-QAM): d = 1/sqrt(170) {(1-2b0)[8-(1-2b2)[4-(1-2b4)[2-(1-2b6)]]]
  + j(1-2b1)[8-(1-2b3)[4-(1-2b5)[2-(1-2b7)]]]} (written from memory).
- IEEE Std 802.11 clause 17.3.5.8, QPSK encoding table: b0 sets I, b1 sets Q, bit 0 -> -1, bit 1 -> +1,
  K_MOD = 1/sqrt(2) (from memory); for QPSK qamsmith's `gray` is this mapping (DEVELOPERS.md).
- The max-log LLR definition (common practice): min over points with bit 1 of |y-x|^2 minus min over
  points with bit 0, evaluated here by brute force over the points above, in floating point.
- Backoff in dB as an amplitude ratio, 20 log10 (common practice).
"""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import numpy as np
import pytest

from qamsmith import DesignSpec, SpecError
from qamsmith.artifacts import MANIFEST, build_files, content_hash, write_design

EXAMPLES = Path(__file__).resolve().parent.parent / "generator" / "spec" / "examples"


def _example(name: str) -> DesignSpec:
    return DesignSpec.from_toml(EXAMPLES / f"{name}.toml")


@pytest.fixture(scope="module")
def built() -> dict[str, dict[str, bytes]]:
    names = ("larkspur-backhaul-256", "larkspur-telemetry-qpsk", "larkspur-spur-16")
    return {n: build_files(_example(n)) for n in names}


def _words(data: bytes) -> list[int]:
    """Hex words of a $readmemh file (our own reader, independent of qamsmith.artifacts)."""
    return [int(line, 16) for line in data.decode().splitlines() if line.strip() and not line.startswith("//")]


def _field(words: list[int], f: dict) -> np.ndarray:
    raw = np.array([(w >> f["lsb"]) & ((1 << f["width"]) - 1) for w in words], dtype=np.int64)
    if f["signed"]:
        raw = np.where(raw >= 1 << (f["width"] - 1), raw - (1 << f["width"]), raw)
    return raw


def _fields(words: list[int], packing: dict) -> dict[str, np.ndarray]:
    return {f["name"]: _field(words, f) for f in packing["fields"]}


def _bits(labels: np.ndarray, k: int) -> np.ndarray:
    return (labels[:, None] >> np.arange(k - 1, -1, -1)) & 1


def nr256(labels: np.ndarray) -> np.ndarray:
    """3GPP TS 38.211 5.1.7 256-QAM, normalized (from memory)."""
    b = 1 - 2 * _bits(labels, 8)
    i = b[:, 0] * (8 - b[:, 2] * (4 - b[:, 4] * (2 - b[:, 6])))
    q = b[:, 1] * (8 - b[:, 3] * (4 - b[:, 5] * (2 - b[:, 7])))
    return (i + 1j * q) / np.sqrt(170)


def ieee_qpsk(labels: np.ndarray) -> np.ndarray:
    """IEEE 802.11 17.3.5.8 QPSK: b0 -> I, b1 -> Q, 0 -> -1, 1 -> +1, K_MOD 1/sqrt(2) (from memory)."""
    b = 2 * _bits(labels, 2) - 1
    return (b[:, 0] + 1j * b[:, 1]) / np.sqrt(2)


def spur16(labels: np.ndarray) -> np.ndarray:
    """The user's own table (larkspur-spur-16.csv), scaled to unit average power."""
    rows = [line.split(",") for line in (EXAMPLES / "larkspur-spur-16.csv").read_text().splitlines()
            if line and line[0].isdigit()]
    pts = np.zeros(16, complex)
    for lab, i, q in rows:
        pts[int(lab)] = float(i) + 1j * float(q)
    pts /= np.sqrt(np.mean(np.abs(pts) ** 2))
    return pts[labels]


REFERENCE = {"larkspur-backhaul-256": nr256, "larkspur-telemetry-qpsk": ieee_qpsk, "larkspur-spur-16": spur16}


# --------------------------------------------------------------------------- manifest


def _manifest(files: dict[str, bytes]) -> dict:
    return json.loads(files[MANIFEST])


def test_manifest_has_the_contract_keys(built) -> None:
    for name, files in built.items():
        m = _manifest(files)
        assert m["generator"] == {"name": "qamsmith", "version": m["generator"]["version"]}
        assert re.fullmatch(r"[0-9a-f]{16}", m["content_hash"])
        assert m["spec"]["name"] == name
        for key in ("points", "lsb", "width", "rom"):
            assert key in m["mapper"]
        for key in ("input_lsb", "llr_lsb", "scale_lsb", "input_format", "llr_format", "scale_format",
                    "output_shift", "metric_fraction", "widths", "algorithm", "per_axis", "search_points",
                    "scale_behaviour"):
            assert key in m["demapper"], (name, key)
        assert set(m["packing"]) == {"mapper_input", "mapper_output", "demapper_input", "demapper_output"}
        assert "rtl" in m and "qformats" in m


def test_manifest_lists_every_file_with_its_sha256(built) -> None:
    for files in built.values():
        listed = {e["path"]: e["sha256"] for e in _manifest(files)["files"]}
        assert set(listed) == set(files) - {MANIFEST}
        assert all(hashlib.sha256(files[p]).hexdigest() == h for p, h in listed.items())
        assert files[MANIFEST].endswith(b"}\n") and files[MANIFEST].startswith(b'{\n  "')


def test_packing_fields_tile_each_word(built) -> None:
    for files in built.values():
        for name, word in _manifest(files)["packing"].items():
            used = 0
            for f in word["fields"]:
                mask = ((1 << f["width"]) - 1) << f["lsb"]
                assert used & mask == 0, name
                used |= mask
            assert used == (1 << word["width"]) - 1, name


def test_packing_follows_the_issue(built) -> None:
    p = _manifest(built["larkspur-telemetry-qpsk"])["packing"]
    # mapper input: b0 (first in time) is the MSB
    assert {f["name"]: f["lsb"] for f in p["mapper_input"]["fields"]} == {"b0": 1, "b1": 0}
    # {Q, I} with I in the low half; {S, Q, I} with the reliability on top
    assert [(f["name"], f["lsb"], f["width"]) for f in p["mapper_output"]["fields"]] == [("i", 0, 10), ("q", 10, 10)]
    assert [(f["name"], f["lsb"], f["width"], f["signed"]) for f in p["demapper_input"]["fields"]] == \
        [("i", 0, 8, True), ("q", 8, 8, True), ("s", 16, 6, False)]
    # LLR of b0 in the most significant field
    assert [(f["name"], f["lsb"]) for f in p["demapper_output"]["fields"]] == [("llr_b0", 5), ("llr_b1", 0)]


@pytest.mark.parametrize("name", list(REFERENCE))
def test_mapper_points_times_lsb_match_the_outside_formula(built, name: str) -> None:
    m = _manifest(built[name])
    pts = np.array(m["mapper"]["points"])
    lsb = m["mapper"]["lsb"]
    assert list(pts[:, 0]) == list(range(len(pts)))
    ref = REFERENCE[name](pts[:, 0])
    assert np.all(np.abs(pts[:, 1] * lsb - ref.real) <= 0.5 * lsb + 1e-12)
    assert np.all(np.abs(pts[:, 2] * lsb - ref.imag) <= 0.5 * lsb + 1e-12)


def test_full_scale_backoff(built) -> None:
    m = _manifest(built["larkspur-telemetry-qpsk"])
    # outermost level 3 dB below the signed 10-bit full scale 511 (20 log10, common practice)
    assert max(abs(c) for p in m["mapper"]["points"] for c in p[1:]) == round(511 * 10 ** (-3 / 20))


@pytest.mark.parametrize("name", list(REFERENCE))
def test_mapper_vectors_match_the_outside_formula(built, name: str) -> None:
    files, m = built[name], _manifest(built[name])
    labels = np.array(_words(files["vectors/mapper_in.hex"]))
    out = _fields(_words(files["vectors/mapper_out.hex"]), m["packing"]["mapper_output"])
    order = m["constellation"]["order"]
    assert list(labels[:order]) == list(range(order)) and labels.size >= 4096
    ref, lsb = REFERENCE[name](labels), m["mapper"]["lsb"]
    assert np.all(np.abs(out["i"] * lsb - ref.real) <= 0.5 * lsb + 1e-12)
    assert np.all(np.abs(out["q"] * lsb - ref.imag) <= 0.5 * lsb + 1e-12)


def test_rom_images_follow_ts_38_211(built) -> None:
    files, m = built["larkspur-backhaul-256"], _manifest(built["larkspur-backhaul-256"])
    lsb, width = m["mapper"]["lsb"], m["mapper"]["width"]
    images = {im["axis"]: im for im in m["mapper"]["rom"]["images"]}
    # TS 38.211 5.1.7: I is driven by b0, b2, b4, b6 and Q by b1, b3, b5, b7
    assert images["i"]["label_bits"] == [0, 2, 4, 6] and images["q"]["label_bits"] == [1, 3, 5, 7]
    for axis in ("i", "q"):
        data = files[images[axis]["path"]]
        assert data.startswith(b"// ")
        rom = _field(_words(data), {"lsb": 0, "width": width, "signed": True})
        c = 1 - 2 * _bits(np.arange(16), 4)
        level = c[:, 0] * (8 - c[:, 1] * (4 - c[:, 2] * (2 - c[:, 3]))) / np.sqrt(170)
        assert rom.size == 16 and np.all(np.abs(rom * lsb - level) <= 0.5 * lsb + 1e-12)


@pytest.mark.parametrize("name", list(REFERENCE))
def test_demapper_vectors_are_max_log_within_half_an_llr_lsb(built, name: str) -> None:
    """llr_code * llr_lsb equals the float max-log metric times the scale, up to the final rounding."""
    files, m = built[name], _manifest(built[name])
    dem = m["demapper"]
    inp = _fields(_words(files["vectors/demapper_in.hex"]), m["packing"]["demapper_input"])
    out = _fields(_words(files["vectors/demapper_out.hex"]), m["packing"]["demapper_output"])
    y = (inp["i"] + 1j * inp["q"]) * dem["input_lsb"]
    scale = inp["s"] * dem["scale_lsb"] if "s" in inp else np.ones(y.size)
    order = m["constellation"]["order"]
    k = order.bit_length() - 1
    pts = REFERENCE[name](np.arange(order))
    d2 = np.abs(y[:, None] - pts[None, :]) ** 2
    bits = _bits(np.arange(order), k).astype(bool)
    llr_max, lsb = dem["llr_max"], dem["llr_lsb"]
    for j in range(k):
        metric = (d2[:, bits[:, j]].min(axis=1) - d2[:, ~bits[:, j]].min(axis=1)) * scale
        code = out[f"llr_b{j}"]
        assert np.all(np.abs(code) <= llr_max)
        free = np.abs(code) < llr_max
        assert np.all(np.abs(code[free] * lsb - metric[free]) <= 0.5 * lsb * (1 + 1e-9)), (name, j)
        sat = ~free
        assert np.all(np.sign(code[sat]) == np.sign(metric[sat]))
        assert np.all(np.abs(metric[sat]) >= (llr_max - 0.5) * lsb * (1 - 1e-9))
    if "s" in inp:                                       # scale code 0 is an erasure
        zero = inp["s"] == 0
        assert zero.any() and (inp["s"] == (1 << 6) - 1).any()
        assert all(np.all(out[f"llr_b{j}"][zero] == 0) for j in range(k))


def test_demapper_vectors_cover_every_input_code(built) -> None:
    files, m = built["larkspur-backhaul-256"], _manifest(built["larkspur-backhaul-256"])
    inp = _fields(_words(files["vectors/demapper_in.hex"]), m["packing"]["demapper_input"])
    every = set(range(-2048, 2048))
    assert every <= set(inp["i"].tolist()) and every <= set(inp["q"].tolist())


def test_search_design_states_its_points_and_cost(built) -> None:
    dem = _manifest(built["larkspur-spur-16"])["demapper"]
    assert dem["per_axis"] is None and dem["structure"] == "2-D search"
    pts = np.array(dem["search_points"])
    ref = spur16(pts[:, 0]) / dem["input_lsb"]        # input codes of the table's points
    assert np.allclose(pts[:, 1], ref.real) and np.allclose(pts[:, 2], ref.imag)
    assert dem["search_cost"]["distances_per_symbol"] == 16


def test_per_axis_structure_of_3gpp_nr(built) -> None:
    per_axis = _manifest(built["larkspur-backhaul-256"])["demapper"]["per_axis"]
    for axis in ("i", "q"):
        a = per_axis[axis]
        assert a["levels"] == 16 and len(a["competitor"]) == 4
        # TS 38.211: bit value 0 on the positive side, i.e. the Gray code inverted on every bit
        assert a["gray_mask"] == 15 and a["inverted"] == [True] * 4
        assert a["level_input_codes"] == [(2 * n - 15) * 64 for n in range(16)]


# --------------------------------------------------------------------------- determinism


def test_files_are_deterministic_and_carry_no_timestamps(built) -> None:
    again = build_files(_example("larkspur-backhaul-256"))
    assert again == built["larkspur-backhaul-256"]
    text = b"".join(v for k, v in again.items() if not k.endswith(".hex")).decode()
    assert not re.search(r"20\d\d-\d\d-\d\d|\d\d:\d\d:\d\d", text)


def test_content_hash_identifies_the_spec() -> None:
    spec = _example("larkspur-telemetry-qpsk")
    assert content_hash(spec) == content_hash(DesignSpec.from_dict(spec.to_dict()))
    assert content_hash(spec) != content_hash(spec.with_settings({"demapper.llr_width": 6}))


def test_every_generated_text_file_names_its_content_hash(built) -> None:
    for files in built.values():
        h = _manifest(files)["content_hash"]
        for path, data in files.items():
            if path != MANIFEST:
                assert h.encode() in data[:4096], path


def test_design_toml_regenerates_the_same_files(built, tmp_path: Path) -> None:
    for name, files in built.items():
        path = tmp_path / f"{name}.toml"
        path.write_bytes(files["design.toml"])
        assert build_files(DesignSpec.from_toml(path)) == files, name


# --------------------------------------------------------------------------- write_design


QPSK = DesignSpec(name="tiny").with_settings({"constellation.order": 4, "demapper.input_width": 6,
                                              "demapper.input_fraction": 2})


def _tree(root: Path) -> dict[str, bytes]:
    return {p.relative_to(root).as_posix(): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


def test_write_design_writes_exactly_build_files(tmp_path: Path) -> None:
    target = write_design(QPSK, tmp_path)
    assert target == tmp_path / "tiny"
    assert _tree(target) == build_files(QPSK)
    assert [p.name for p in tmp_path.iterdir()] == ["tiny"]          # no temporary directories left


def test_rewrite_of_an_own_directory_and_stale_files(tmp_path: Path) -> None:
    target = write_design(QPSK, tmp_path)
    # an earlier run that wrote an extra file: it is stale now and removed
    manifest = json.loads((target / MANIFEST).read_text())
    (target / "rom" / "old.hex").write_text("00\n")
    manifest["files"].append({"path": "rom/old.hex", "sha256": hashlib.sha256(b"00\n").hexdigest()})
    (target / MANIFEST).write_text(json.dumps(manifest))
    write_design(QPSK, tmp_path)
    assert _tree(target) == build_files(QPSK)


def test_foreign_files_are_refused_without_force_and_kept_with_it(tmp_path: Path) -> None:
    target = write_design(QPSK, tmp_path)
    (target / "notes.txt").write_text("bench notes\n")
    (target / "rtl" / "mine.v").parent.mkdir(exist_ok=True)
    (target / "rtl" / "mine.v").write_text("// mine\n")
    before = _tree(target)
    other = QPSK.with_settings({"demapper.llr_width": 6})
    with pytest.raises(SpecError, match=r"^--out = '[^']*': a directory where the design directory .*tiny is new or as "
                                        r"qamsmith wrote it; it holds 2 file\(s\) qamsmith did not write, e\.g\. "
                                        r"'notes\.txt' \(use --force"):
        write_design(other, tmp_path)
    assert _tree(target) == before
    write_design(other, tmp_path, force=True)
    after = _tree(target)
    assert after["notes.txt"] == b"bench notes\n" and after["rtl/mine.v"] == b"// mine\n"
    assert {k: v for k, v in after.items() if k not in ("notes.txt", "rtl/mine.v")} == build_files(other)


def test_report_stays_with_its_design_and_is_kept_as_stale_with_a_changed_one(tmp_path: Path) -> None:
    target = write_design(QPSK, tmp_path)
    (target / "report").mkdir()
    (target / "report" / "report.md").write_text("# review\n")
    write_design(QPSK, tmp_path)                      # same design: the report still describes it
    assert (target / "report" / "report.md").read_text() == "# review\n"
    other = QPSK.with_settings({"demapper.llr_width": 6})
    write_design(other, tmp_path)                     # a changed design: the old report is kept, marked stale
    stale = f"report-stale-{content_hash(QPSK)}/report.md"
    tree = _tree(target)
    assert tree.pop(stale) == b"# review\n"
    assert tree == build_files(other)


def test_edited_generated_file_needs_force(tmp_path: Path) -> None:
    target = write_design(QPSK, tmp_path)
    (target / "design.toml").write_text("# edited\n")
    with pytest.raises(SpecError, match=r"1 generated file\(s\) changed since, e\.g\. 'design\.toml'"):
        write_design(QPSK, tmp_path)
    write_design(QPSK, tmp_path, force=True)
    assert _tree(target) == build_files(QPSK)


def test_foreign_file_in_the_way_is_refused_even_with_force(tmp_path: Path) -> None:
    target = tmp_path / "tiny"
    target.mkdir()
    (target / "design.toml").write_text("# someone else's\n")
    with pytest.raises(SpecError, match=r"'design\.toml' there was not written by qamsmith and would be overwritten"):
        write_design(QPSK, tmp_path, force=True)
    assert _tree(target) == {"design.toml": b"# someone else's\n"}


def test_a_failed_write_leaves_the_old_design_intact(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    target = write_design(QPSK, tmp_path)
    (target / "notes.txt").write_text("keep\n")
    before = _tree(target)
    calls = {"n": 0}
    real = Path.write_bytes

    def flaky(self: Path, data: bytes) -> int:
        calls["n"] += 1
        if calls["n"] == 3:
            raise OSError(28, "No space left on device")
        return real(self, data)

    monkeypatch.setattr(Path, "write_bytes", flaky)
    with pytest.raises(SpecError, match=r"^--out = '.*tiny': a writable directory \(No space left on device\)$"):
        write_design(QPSK.with_settings({"demapper.llr_width": 6}), tmp_path, force=True)
    assert _tree(target) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["tiny"]


def test_invalid_spec_writes_nothing(tmp_path: Path) -> None:
    bad = DesignSpec(name="bad").with_settings({"constellation.order": 256, "demapper.input_width": 8})
    with pytest.raises(SpecError):
        write_design(bad, tmp_path / "root")
    assert not (tmp_path / "root").exists()
