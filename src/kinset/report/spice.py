"""``models.lib``: one SPICE diode ``.model`` card per part placed in a set.

The card carries the parameters kinset measured, in the SPICE diode model's names
(IS, N, RS from the forward fit; CJO, VJ, M from C–V; TT from reverse recovery; BV
with IBV from a leakage sweep that reached breakdown), and TNOM, the reference
temperature the parameters were fitted at, so that a simulator scales them with
temperature from the same point the fit did. EG and XTI are the values the fit
assumed for the reel's material (or reel.yaml's own); they are not measured, but
IS only means what the fit meant together with them. Parameters that were not
measured are left out, so the simulator's defaults apply, and a comment says which.
A part without a fitted IS and N (single readings, a rejected or missing forward fit)
gets no card at all, only a comment line saying why: a card of simulator defaults
would make a simulation of its set fiction.

The file is plain ASCII: device ids and notes appear in comments with anything
outside printable ASCII replaced, so no id can break out of a comment line.

References
----------
.. [1] L. W. Nagel, "SPICE2: A computer program to simulate semiconductor circuits",
   Memorandum ERL-M520, University of California, Berkeley, 1975 (the diode model's
   parameters IS, N, RS, CJO, VJ, M, TT, BV, IBV, EG, XTI and the nominal temperature).
"""

from __future__ import annotations

import hashlib
import itertools
import math
import re
from dataclasses import dataclass, field

import pandas as pd

from kinset.fitting.forward import NOTES as FORWARD_NOTES
from kinset.format import si
from kinset.outcomes import cell_codes, first_clause
from kinset.registry import NAMES
from kinset.report.inputs import rows_by_device

MAX_NAME = 32
_SAFE_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*")
_UNSAFE_CHARS = re.compile(r"[^A-Za-z0-9_]+")
# ngspice clamps the grading coefficient at 0.9 (measured with ngspice 39).
M_LIMIT = 0.9


def model_names(devices) -> dict[str, str]:
    """A SPICE-safe, unique model name for each device id.

    Names use letters, digits and underscores only, start with a letter, are at most
    32 characters, and are unique without regard to case (SPICE folds case). An id
    that is already such a name is used as it is; otherwise (and on a clash) the
    sanitised id gets a suffix from its SHA-256, so the name still points back to
    the part and two different ids never share a name.
    """
    names: dict[str, str] = {}
    taken: set[str] = set()
    for dev in devices:
        dev = str(dev)
        if dev in names:
            continue
        name = dev if len(dev) <= MAX_NAME and _SAFE_NAME.fullmatch(dev) else None
        if name is None or name.lower() in taken:
            clean = _UNSAFE_CHARS.sub("_", dev).strip("_")
            if not clean or not clean[0].isalpha():
                clean = "D_" + clean
            digest = hashlib.sha256(dev.encode("utf-8")).hexdigest()
            k = 6
            while True:
                name = f"{clean[:MAX_NAME - k - 1]}_{digest[:k]}"
                if name.lower() not in taken:
                    break
                k += 2
        taken.add(name.lower())
        names[dev] = name
    return names


# Characters of the notes spelled in ASCII in a SPICE comment; any other character outside
# printable ASCII becomes '?'.
_ASCII = str.maketrans({"\u2013": "-", "\u2014": "-", "\u00b5": "u", "\u00d7": "x",
                        "\u2212": "-", "\u00b0": "deg ", "\u00b7": "*", "\u03a9": "ohm",
                        "\u00b1": "+/-", "\u2264": "<=", "\u2265": ">=", "\u221a": "sqrt"})


def comment_text(text) -> str:
    """Text safe inside a SPICE comment line: printable ASCII, one line."""
    s = "" if text is None else str(text)
    if s.isascii() and s.isprintable():     # most lines (40,000 at 10,000 quads): as they are
        return s
    return "".join(c if " " <= c <= "~" else "?" for c in s.translate(_ASCII))


def _num(value: float) -> str:
    return f"{float(value):.10g}"


def _finite(row, column) -> float | None:
    if row is None or column not in row:
        return None
    try:
        v = float(row[column])
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _usable(row) -> bool:
    return row is not None and str(row.get("status", "")) != "rejected"


@dataclass
class DeviceModel:
    """What ``models.lib`` says about one placed part.

    ``params`` are the card's parameters and ``notes`` its comment lines on what the card
    leaves out or assumes; ``no_card`` is why no card is written ('' when one is): a
    card needs a fitted IS and N, never the simulator's defaults in their place.
    ``fixed``: the lines written right above the card on a parameter the readings did
    not determine (RS fixed at 0, a wide RS or N), each with why.
    """

    params: dict[str, float]
    notes: list[str]
    no_card: str = ""
    fixed: list[str] = field(default_factory=list)   # what was fixed or is not determined, why


def _forward_fit(fwd) -> tuple[dict[str, float], str]:
    """IS, N, RS of a usable forward fit, or why there is none (a card needs IS and N)."""
    if fwd is None:
        return {}, "no forward data, so no fitted IS and N"
    fit = {k: _finite(fwd, c) for k, c in (("IS", "is_A"), ("N", "n"), ("RS", "rs_ohm"))}
    if _usable(fwd) and all(v is not None for v in fit.values()):
        return fit, ""
    note = first_clause(comment_text(fwd.get("note", ""))) or "no fitted forward model"
    return {}, f"IS and N not fitted ({note})"


def _undetermined(fwd: dict) -> list[str]:
    """What the forward fit fixed or could not determine, and why (issue 15)."""
    codes = set(cell_codes(fwd.get("reason_code")))
    out = []
    lo, hi = _finite(fwd, "i_min_A"), _finite(fwd, "i_max_A")
    span = f"{si(lo, 'A')} to {si(hi, 'A')}" if lo is not None and hi is not None else "?"
    if "rs_not_determined" in codes or _finite(fwd, "rs_fixed") == 1:
        noise = _finite(fwd, "noise_V")
        why = FORWARD_NOTES.text("rs_not_determined", current=si(hi, "A") if hi else "?",
                                 noise=si(noise, "V") if noise is not None else "?")
        out.append(f"RS fixed at 0: {why}")
    if "rs_imprecise" in codes:
        out.append(f"RS not determined (its 95 % interval is wide, see forward.csv); the card "
                   f"holds only over the measured {span}")
    if "n_not_determined" in codes:
        out.append(f"N and IS not determined (their 95 % intervals are wide, see forward.csv); "
                   f"the card holds only over the measured {span}")
    return [comment_text(x) for x in out]


def device_model(device: str, rows: dict[str, dict | None], reel: dict) -> DeviceModel:
    """The card's parameters for one device and comment lines on what is left out, or why
    it gets no card.

    ``rows`` maps dataset name (forward, capacitance, recovery, leakage) to the
    device's row of that table as a dict, or None.
    """
    params: dict[str, float] = {}
    notes: list[str] = []
    # the card's parameters come from these datasets' fits: IS N RS; CJO VJ M; TT; BV
    fwd, cap = rows.get("forward"), rows.get("capacitance")
    rec, leak = rows.get("recovery"), rows.get("leakage")
    fit, why = _forward_fit(fwd)
    if why:
        return DeviceModel({}, [], why)
    params.update(fit)
    fixed = _undetermined(fwd)
    if _usable(cap) and "vj_m_not_determined" in cell_codes(cap.get("reason_code")):
        fixed.append(comment_text(
            f"VJ and M not determined by the biases measured ({_finite(cap, 'vr_min_V'):g} to "
            f"{_finite(cap, 'vr_max_V'):g} V, see capacitance.csv): the card's C(V) holds "
            "only over that range"))
    tnom = _finite(fwd, "reference_temperature_C")
    if _usable(cap) and all(_finite(cap, c) is not None for c in ("cj0_F", "vj_V", "m")):
        params.update(CJO=_finite(cap, "cj0_F"), VJ=_finite(cap, "vj_V"), M=_finite(cap, "m"))
        if params["M"] > M_LIMIT:
            notes.append(f"M = {params['M']:.4g} is above {M_LIMIT}: ngspice clamps M at "
                         f"{M_LIMIT}, the C-V law then differs from the fit")
        cp = _finite(cap, "cp_F")
        if cp:
            notes.append(f"package capacitance CP = {cp:.4g} F is not part of the diode "
                         "model: put a capacitor in parallel")
    else:
        notes.append("CJO, VJ, M: no usable C-V fit; no junction capacitance (CJO = 0)")
    tt = _finite(rec, "tt_s") if _usable(rec) else None
    if tt is not None and tt > 0:
        params["TT"] = tt
    else:
        notes.append("TT: no usable reverse-recovery waveform; TT = 0")
    bv = _finite(leak, "bv_V") if _usable(leak) else None
    ibv = (reel.get("leakage") or {}).get("breakdown_current_A")
    if bv is not None and bv > 0 and ibv:
        params.update(BV=bv, IBV=float(ibv))
    elif leak is not None and _finite(leak, "sweep_max_V") is not None:
        notes.append(f"BV: no breakdown reached up to {_finite(leak, 'sweep_max_V'):.4g} V; "
                     "no breakdown in the model")
    else:
        notes.append("BV: not measured; no breakdown in the model")
    eg, xti = _finite(fwd, "eg_eV"), _finite(fwd, "xti")
    eg = eg if eg is not None else reel.get("eg_eV")
    xti = xti if xti is not None else reel.get("xti")
    if eg is not None and xti is not None:
        params.update(EG=float(eg), XTI=float(xti))
        notes.append(f"EG, XTI: the values the fit assumed for "
                     f"{comment_text(reel.get('material', 'the material'))}, not measured")
    if tnom is None:
        tnom = reel.get("reference_temperature_C")
    if tnom is not None:
        params["TNOM"] = float(tnom)
    return DeviceModel(params, notes, fixed=fixed)




ORDER = ("IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV", "IBV", "EG", "XTI", "TNOM")


def model_card(name: str, params: dict[str, float], per_line: int = 4) -> str:
    """``.model NAME D(...)``, continued over '+' lines a few parameters at a time."""
    items = [f"{k}={_num(params[k])}" for k in ORDER if k in params]
    if not items:
        return f".model {name} D\n"
    lines = [" ".join(items[i:i + per_line]) for i in range(0, len(items), per_line)]
    text = f".model {name} D({lines[0]}"
    for line in lines[1:]:
        text += f"\n+ {line}"
    return text + ")\n"


def _position_text(pos) -> str:
    if pos is None or (isinstance(pos, float) and not math.isfinite(pos)):
        return "no position"
    if isinstance(pos, float) and pos.is_integer():
        pos = int(pos)
    return f"position {comment_text(pos)}"


def models_lib(sets: pd.DataFrame, tables: dict[str, pd.DataFrame], reel: dict,
               title: str, version: str) -> tuple[str, dict[str, str], dict[str, str]]:
    """The text of ``models.lib``, the model name of each placed device that has a card,
    and why each placed device without one has none."""
    order = sets.sort_values(["set"], kind="stable")
    rows = {k: rows_by_device(tables.get(k), order["device"].astype(str)) for k in NAMES}
    names = model_names(order["device"].astype(str))
    tnom = reel.get("reference_temperature_C")
    out = [
        f"* {comment_text(title)}",
        f"* SPICE diode models of every part placed in a set, written by kinset {comment_text(version)}.",
        f"* Parameters hold at TNOM = {comment_text(tnom)} degC, the reel's reference temperature"
        if tnom is not None else "* Parameters hold at the TNOM given on each card",
        "* (each card sets TNOM itself, so '.options tnom' does not change its meaning).",
        "* Only measured parameters are given (EG, XTI: the fit's assumptions); others take",
        "* the simulator's defaults. Reverse leakage below breakdown is not modelled.",
        "* A part without a fitted IS and N gets no card, only a comment line saying why.",
        "",
    ]
    n_sets = order["set"].nunique()
    no_card: dict[str, str] = {}
    # one pass over plain lists (sorted by set above): a DataFrame per set cost ~1 s at
    # 2,500 quads
    rows_of = zip(order["set"].tolist(), order["device"].astype(str).tolist(),
                  order["position"].tolist())
    for s, block in itertools.groupby(rows_of, key=lambda r: r[0]):
        block = list(block)
        out.append(f"* ---- set {comment_text(s)} of {n_sets}: "
                   + ", ".join(names[d] for _s, d, _p in block))
        for _s, dev, pos in block:
            model = device_model(dev, {k: rows[k].get(dev) for k in rows}, reel)
            out.append(f"* device {comment_text(dev)}, {_position_text(pos)}, set {comment_text(s)}")
            if model.no_card:
                no_card[dev] = model.no_card
                out.append(f"* no card for {names[dev]}: {comment_text(model.no_card)}")
                continue
            out += [f"*   {n}" for n in model.notes]
            out += [f"* {names[dev]}: {x}" for x in model.fixed]
            out.append(model_card(names[dev], model.params).rstrip("\n"))
        out.append("")
    out.append("* end of models")
    carded = {d: n for d, n in names.items() if d not in no_card}
    return "\n".join(out) + "\n", carded, no_card
