"""The simulation matrix shared by the Verilog and VHDL tiers: every order x labeling x algorithm
at two width settings, the spec of each case, and the refusals the spec layer must give."""

from __future__ import annotations

from qamsmith.errors import SpecError
from qamsmith.model import derive
from qamsmith.numbers.constellation import named
from qamsmith.spec import ConstellationSpec, DemapperSpec, DesignSpec, InterfaceSpec, MapperSpec

ORDERS = (2, 4, 16, 64, 256, 1024, 4096)
LABELINGS = ("gray", "3gpp-nr", "ieee-802.11", "natural", "table")
ALGORITHMS = ("maxlog", "folded", "hard")


def user_table(order: int) -> tuple[tuple[int, float, float], ...]:
    """A user table: the Gray points with scrambled labels (not a product labeling above 2 points)."""
    pts = named(order, "gray").points
    return tuple((int((lab * 5 + 3) % order), float(p.real), float(p.imag)) for lab, p in enumerate(pts))


def widths(order: int, setting: int) -> dict:
    """Two width settings: narrow (1 input fraction bit, 5-bit LLRs) and wide (3 fraction bits,
    10-bit LLRs, a reliability input, tuser, explicit pipeline stages)."""
    levels = 2 if order == 2 else 1 << ((order.bit_length() - 1) // 2)
    if setting == 0:
        f = 1
        w = ((levels - 1) << f).bit_length() + 2
        return {"demapper": DemapperSpec(input_width=w, input_fraction=f, llr_width=5, llr_fraction=1),
                "mapper": MapperSpec(width=10, fraction=8, implementation="rom"),
                "interface": InterfaceSpec(tlast=True)}
    f = 3
    w = ((levels - 1) << f).bit_length() + 3
    return {"demapper": DemapperSpec(input_width=w, input_fraction=f, llr_width=10, llr_fraction=2,
                                     rounding="half-even", scale_width=4, scale_fraction=2),
            "mapper": MapperSpec(width=14, fraction=12, scaling="full-scale", implementation="logic", rounding="half-away"),
            "interface": InterfaceSpec(tlast=False, tuser_width=3, mapper_stages=3, demapper_stages=2)}


def matrix_spec(order: int, labeling: str, alg: str, setting: int) -> DesignSpec:
    w = widths(order, setting)
    table = user_table(order) if labeling == "table" else ()
    name = f"m{order}-{labeling.replace('.', '')}-{alg}-{setting}"
    spec = DesignSpec(name=name, constellation=ConstellationSpec(order=order, labeling=labeling, table=table),
                      demapper=DemapperSpec(**{**w["demapper"].__dict__, "algorithm": alg}),
                      mapper=w["mapper"], interface=w["interface"])
    return spec


def case_id(order: int, labeling: str, alg: str, setting: int) -> str:
    w = widths(order, setting)["demapper"].input_width
    return f"qam{order}-{labeling}-{alg}-w{w}"


CASES = [(o, lab, alg, s) for o in ORDERS for lab in LABELINGS for alg in ALGORITHMS for s in (0, 1)]


def expect_refusal(order: int, labeling: str, alg: str) -> str | None:
    """The refusals the spec layer must give (None: the case must simulate)."""
    if labeling == "table" and order > 256:
        return r"constellation\.table = .*not a product.*up to 256 points"
    if alg == "folded" and (labeling == "table" and order > 2 or labeling == "natural" and order > 4
                            or labeling == "3gpp-nr" and order == 2):  # 3GPP BPSK: one bit on both axes
        return r"demapper\.algorithm = 'folded'.*Gray-type"
    return None


def accepted_spec(case: tuple[int, str, str, int], **interface: object) -> DesignSpec | str:
    """The spec of a case as the generator accepts it (a logic mapper the spec refuses becomes a ROM),
    with `interface` settings on top; the refusal message when the case is refused."""
    order, labeling, alg, setting = case
    spec = matrix_spec(order, labeling, alg, setting)
    if interface:
        spec = spec.with_settings({f"interface.{k}": v for k, v in interface.items()})
    try:
        derive(spec)
    except SpecError as exc:
        if "mapper.implementation" not in str(exc):
            return str(exc)
        spec = spec.with_settings({"mapper.implementation": "rom", "mapper.tables": "inline"})
        try:
            derive(spec)
        except SpecError as exc2:
            return str(exc2)
    return spec


#: adaptive cores and lanes in the simulation matrix (Verilog and VHDL): the issue's example, every algorithm,
#: both Gray-type families with and without BPSK, a single order with lanes, and the stream options with them
MODE_CASES: dict[str, dict] = {
    "nr-4to256-maxlog-x4": {"constellation.orders": [4, 16, 64, 256], "constellation.labeling": "3gpp-nr",
                            "interface.lanes": 4, "interface.tlast": True},
    "wlan-2to256-folded-scale-tuser": {"constellation.orders": "wlan-vht", "constellation.labeling": "ieee-802.11",
                                       "demapper.algorithm": "folded", "demapper.scale_width": 3,
                                       "demapper.scale_fraction": 1, "interface.tuser_width": 3,
                                       "interface.demapper_stages": 2, "mapper.scaling": "full-scale"},
    "gray-2to64-hard-x3-skid": {"constellation.orders": [2, 4, 16, 64], "constellation.labeling": "gray",
                                "demapper.algorithm": "hard", "interface.lanes": 3, "interface.skid": True,
                                "interface.flow_control": "per-stage", "mapper.tables": "readmemh"},
    "nr-4to64-maxlog-narrow": {"constellation.orders": [4, 16, 64], "constellation.labeling": "3gpp-nr",
                               "demapper.input_width": 7, "demapper.input_fraction": 1, "demapper.llr_width": 5,
                               "demapper.llr_fraction": 0, "demapper.rounding": "half-even"},
    "qam64-gray-maxlog-x2-scale": {"constellation.order": 64, "constellation.labeling": "gray", "interface.lanes": 2,
                                   "demapper.scale_width": 4, "demapper.scale_fraction": 2, "interface.tuser_width": 2,
                                   "interface.tlast": True},
    "cross128-x2": {"constellation.order": 128, "constellation.labeling": "gray", "constellation.shape": "cross",
                    "interface.lanes": 2},
}


def mode_spec(name: str, **interface: object) -> DesignSpec:
    """The spec of a MODE_CASES entry (name m-<case>), with `interface` settings on top."""
    settings = {**MODE_CASES[name], **{f"interface.{k}": v for k, v in interface.items()}}
    return DesignSpec(name=f"m-{name}").with_settings(settings)
