"""Invented data and small helpers shared by the dashboard's tests (tests/test_webui_*.py and the browser tests).

Everything here is made up for the tests: the locality, the crystals, the
instrument (described generically) and the curves.  The thermomagnetic curve
is a power law below an invented ordering temperature; nothing in the tests
relies on it being physically exact.
"""

from __future__ import annotations

import html
import io
import re
from dataclasses import dataclass
from html.parser import HTMLParser

import numpy as np

ORIGIN = "Tarnwick Fell"
PLANTED_TC_K = 598.0  # invented; only shapes the curve


def thermomagnetic_csv(n: int = 3000, *, t_lo_c: float = 25.0, t_hi_c: float = 425.0,
                       m0_emu: float = 1.2e-2, seed: int = 7) -> bytes:
    """A delimited export: temperature in degrees Celsius, moment in emu (CGS), as a furnace run writes it."""
    rng = np.random.default_rng(seed)
    t_c = np.linspace(t_lo_c, t_hi_c, n)
    t_k = t_c + 273.15
    m = m0_emu * np.clip(1 - t_k / PLANTED_TC_K, 0, None) ** 0.36 + 2e-6 + rng.normal(0, 1e-6, n)
    lines = ["Temp (°C),Moment (emu)"] + [f"{a:.3f},{b:.6e}" for a, b in zip(t_c, m)]
    return ("\n".join(lines) + "\n").encode("utf-8")


def two_thermometer_csv(n: int = 400) -> bytes:
    """An export with a set-point and a sample thermometer; the guess takes the first, the user wants the second."""
    t_set = np.linspace(300.0, 700.0, n)
    t_sample = t_set - 1.5
    m = 5e-3 * np.clip(1 - t_sample / PLANTED_TC_K, 0, None) ** 0.36 + 1e-6
    lines = ["Setpoint (K),Sample temp (K),Moment (emu)"]
    lines += [f"{a:.3f},{b:.3f},{c:.6e}" for a, b, c in zip(t_set, t_sample, m)]
    return ("\n".join(lines) + "\n").encode("utf-8")


def loop_csv(n: int = 801) -> bytes:
    """A hysteresis loop in oersted and emu (a tanh branch pair with an invented coercive field)."""
    h = np.concatenate([np.linspace(10000, -10000, n // 2 + 1), np.linspace(-10000, 10000, n // 2 + 1)[1:]])
    up = np.r_[np.zeros(n // 2 + 1, bool), np.ones(n // 2, bool)]
    m = 4e-3 * np.tanh((h + np.where(up, -150.0, 150.0)) / 900.0)
    lines = ["Field (Oe),Moment (emu)"] + [f"{a:.2f},{b:.6e}" for a, b in zip(h, m)]
    return ("\n".join(lines) + "\n").encode("utf-8")


def png_bytes(width: int = 640, height: int = 400) -> bytes:
    """An 8-bit grey PNG with stripes (an invented 'domain' pattern)."""
    from PIL import Image

    x = np.arange(width)[None, :] + 0.5 * np.arange(height)[:, None]
    arr = (127 + 100 * np.sin(x / 9.0)).astype(np.uint8)
    out = io.BytesIO()
    Image.fromarray(arr).save(out, format="PNG")  # uint8 -> 8-bit grey
    return out.getvalue()


def tiff16_bytes(width: int = 300, height: int = 200) -> bytes:
    """A 16-bit grey TIFF, as many microscope cameras write (values spread over 0-65535)."""
    from PIL import Image

    y, x = np.mgrid[0:height, 0:width]
    arr = (32768 + 30000 * np.sin(x / 11.0) * np.cos(y / 17.0)).astype(np.uint16)
    out = io.BytesIO()
    image = Image.fromarray(arr)  # uint16 -> 16-bit grey
    assert image.mode == "I;16"
    image.save(out, format="TIFF")
    return out.getvalue()


@dataclass
class Collection:
    """What :func:`build_collection` made (codes and ids the tests look for)."""

    root: str
    piece: str
    second_piece: str
    grandchild: str
    powder: str
    thermo_run: int
    loop_run: int
    planned_run: int
    image: int
    thermo_bytes: bytes


def build_collection(vault) -> Collection:
    """A small invented collection through the Vault: a crystal, its pieces, runs, a treatment, an image."""
    vault.add_origin(ORIGIN, kind="locality")
    vault.add_instrument("furnace-magnetometer", kind="magnetometer", place="room 3")
    vault.add_specimen("TF1", mass="310.0+/-0.1 mg", kind="single crystal", dims="6.0 x 4.5 x 3.0 mm",
                       origin=ORIGIN, storage="desiccator 2", notes="Parent crystal, platy.")
    vault.add_specimen("TF1-a", parent="TF1", mass="40.00+/-0.02 mg", same_orientation=True)
    vault.add_specimen("TF1-b", parent="TF1", mass="55.00+/-0.02 mg")
    vault.add_specimen("TF1-a1", parent="TF1-a", mass="12.50+/-0.02 mg", same_orientation=True)
    vault.add_specimen("SX2", mass="80.0+/-0.1 mg", kind="powder", origin="batch SX-2")
    vault.add_composition("TF1", method="microprobe", wt={"Fe": (60.5, 0.3), "S": (39.2, 0.3)},
                          superstructure="4C", measured="2026-01-10T12:00Z")
    vault.add_composition("SX2", method="microprobe", wt={"Fe": (63.3, 0.3), "S": (36.5, 0.3)},
                          superstructure="2C", measured="2026-01-11T12:00Z")
    vault.add_orientation("TF1", system="hexagonal", method="Laue", axes="a=X,c*=Z", uncertainty="2 deg",
                          measured="2026-01-12T12:00Z")
    thermo = thermomagnetic_csv()
    r1 = vault.ingest(data=thermo, source_name="tf1a_heating.csv", specimen="TF1-a", kind="thermomagnetic",
                      instrument="furnace-magnetometer", overrides=["started=2026-02-01T09:00Z"])
    vault.add_treatment("TF1-a", kind="anneal", at="2026-02-03T10:00Z",
                        conditions=["temperature=573 K", "duration=2 h", "atmosphere=argon"])
    r2 = vault.ingest(data=loop_csv(), source_name="tf1a_loop.csv", specimen="TF1-a", kind="hysteresis",
                      direction="Z", overrides=["started=2026-02-05T09:00Z", "temperature=300 K"])
    planned = vault.log_run("TF1-b", "susceptibility", started="2026-02-07T09:00Z",
                            instrument="furnace-magnetometer")
    image = vault.attach_image(data=png_bytes(), name="tf1a_domains.png", specimen="TF1-a",
                               pixel_size="0.25 um", caption="Domain walls on the polished face")
    plant_derivation(vault, r1.run_id, r2.run_id)
    return Collection(root="TF1", piece="TF1-a", second_piece="TF1-b", grandchild="TF1-a1", powder="SX2",
                      thermo_run=r1.run_id, loop_run=r2.run_id, planned_run=planned, image=image,
                      thermo_bytes=thermo)


def plant_derivation(vault, thermo_run: int, loop_run: int) -> None:
    """Stored derived values with invented numbers, so that pages show transitions and results.

    Test setup only: the dashboard displays derivations and never makes them;
    this writes them through the service layer as an analysis would, with a
    method name that says what it is.
    """
    from magvault.analysis.results import Outcome, ResultValue, TransitionEstimate
    from magvault.services.derive import store_outcome
    from magvault.services.runs import get_run, latest_series

    thermo = Outcome(method="planted-for-tests", version="1.0", parameters={"window_K": 20.0, "smooth": 5},
                     transitions=(TransitionEstimate("ordering", 597.9, 1.2, "planted-for-tests", branch="heating",
                                                     primary=True, width_K=8.5),),
                     warnings=("invented numbers for the dashboard's tests",))
    loop = Outcome(method="planted-loop", version="0.3", parameters={"slope_from_T": 0.7},
                   results=(ResultValue("Hc", 0.0123, 0.0004, "T", "planted-loop"),
                            ResultValue("Ms", 0.301, 0.002, "A m^2/kg", "planted-loop")))
    with vault.write() as session:
        for run_id, outcome in ((thermo_run, thermo), (loop_run, loop)):
            run = get_run(session, run_id)
            store_outcome(session, outcome, [(run, latest_series(session, run_id))])


# --- HTML helpers -----------------------------------------------------------------------------

def csrf_token(page: str) -> str:
    m = re.search(r'name="csrf_token" type="hidden" value="([^"]+)"', page)
    assert m, "page has no CSRF token"
    return m.group(1)


class _Forms(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.forms: list[dict] = []
        self._select: str | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "form":
            self.forms.append({"action": a.get("action"), "method": (a.get("method") or "get").lower(),
                               "fields": {}, "selects": {}})
        elif not self.forms:
            return
        elif tag == "input" and a.get("name"):
            if a.get("type") in ("checkbox", "radio") and "checked" not in a:
                return
            if a.get("type") in ("submit", "file"):
                return
            self.forms[-1]["fields"][a["name"]] = a.get("value", "")
        elif tag == "select" and a.get("name"):
            self._select = a["name"]
            self.forms[-1]["selects"][a["name"]] = []
            self.forms[-1]["fields"][a["name"]] = None
        elif tag == "option" and self._select:
            value = a.get("value", "")
            self.forms[-1]["selects"][self._select].append(value)
            # A browser sends the selected option, or the first when none is marked.
            if "selected" in a or self.forms[-1]["fields"][self._select] is None:
                self.forms[-1]["fields"][self._select] = value
        elif tag == "textarea" and a.get("name"):
            self.forms[-1]["fields"][a["name"]] = ""

    def handle_endtag(self, tag):
        if tag == "select":
            self._select = None


def forms_of(page: str) -> list[dict]:
    """Every form on the page: action, method, the values a browser would send, and select options."""
    parser = _Forms()
    parser.feed(page)
    return parser.forms


def form_with_action(page: str, action_part: str) -> dict:
    for f in forms_of(page):
        if f["action"] and action_part in f["action"]:
            return f
    raise AssertionError(f"no form posting to {action_part!r}")


def text_of(page: str) -> str:
    """The visible text of a page, whitespace collapsed (scripts and JSON blocks dropped)."""
    page = re.sub(r"<script\b.*?</script>", " ", page, flags=re.S)
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page))).strip()


def filled_sqlite(folder) -> tuple[str, "Collection"]:
    """A SQLite vault in ``folder`` holding :func:`build_collection`; returns (path, what was made)."""
    import magvault

    path = str(folder / "vault.db")
    with magvault.open(path, create=True) as vault:
        made = build_collection(vault)
    return path, made


# --- a small collection for the pages that look across it (tests/test_webui_explore*.py) ------------

EXPLORE_ORIGIN = "Harrowmere Ridge"
EXPLORE_OTHER_ORIGIN = "Kestle Deep"
#: Invented composition trend of the low-temperature transition: T = TREND_T0_K + TREND_SLOPE_K * (x - 0.11).
TREND_T0_K = 32.0
TREND_SLOPE_K = 60.0
PLANTED_U_K = 0.15


def lowt_csv(t_k: float, *, n: int = 391, t_lo: float = 5.0, t_hi: float = 200.0, m0_emu: float = 2.0,
             step: float = 0.03, width_k: float = 1.0, seed: int = 0) -> bytes:
    """A delimited low-temperature export (kelvin, emu) with a smooth step down at ``t_k`` (invented shape)."""
    rng = np.random.default_rng(seed)
    t = np.linspace(t_lo, t_hi, n)
    m = m0_emu * (1 - step / (1 + np.exp(-(t - t_k) / width_k))) * (1 - 1e-4 * t) + rng.normal(0, 2e-4, n)
    lines = ["Temperature (K),Moment (emu)"] + [f"{a:.3f},{b:.7e}" for a, b in zip(t, m)]
    return ("\n".join(lines) + "\n").encode("utf-8")


def plant_transitions(vault, planted: list[tuple[int, str, float, float, str | None]], *,
                      second_method_offset_K: float | None = None) -> None:
    """Stored transitions with invented values: (run id, kind, temperature K, uncertainty K, branch).

    Test setup only (the pages display derivations and never make them).  With
    ``second_method_offset_K``, each run also gets a non-primary row from a
    second invented method, offset by that much, for the coupled page.
    """
    from magvault.analysis.results import Outcome, TransitionEstimate
    from magvault.services.derive import store_outcome
    from magvault.services.runs import get_run, latest_series

    with vault.write() as session:
        for run_id, kind, t_k, u_k, branch in planted:
            rows = [TransitionEstimate(kind, t_k, u_k, "planted-for-tests", branch=branch, primary=True)]
            if second_method_offset_K is not None:
                rows.append(TransitionEstimate(kind, t_k + second_method_offset_K, 2 * u_k, "planted-second",
                                               branch=branch, primary=False))
            outcome = Outcome(method="planted-for-tests", version="1.0", parameters={"kind": kind},
                              transitions=tuple(rows), warnings=("invented numbers for the dashboard's tests",))
            run = get_run(session, run_id)
            store_outcome(session, outcome, [(run, latest_series(session, run_id))])


@dataclass
class ExploreCollection:
    """What :func:`build_explore_collection` made, and which specimen carries which planted cause."""

    pieces: list[str]
    annealed: str          # shifted by an anneal between its runs
    off_trend: str         # above the composition trend in every run
    foreign: str           # another origin, far below the others
    no_composition: str    # a specimen without an analysis (cannot be placed on x)
    runs: dict[str, list[int]]
    planted_K: dict[int, float]
    ordering_runs: list[int]


def build_explore_collection(vault) -> ExploreCollection:
    """An invented crystal cut into six pieces, one foreign specimen and one without composition.

    Every piece has two low-temperature runs a week apart with the low-T
    transition planted on the invented trend (plus a deterministic jitter of a
    few hundredths of a kelvin); one piece is annealed between its runs and
    shifts by +2 K, one sits 5 K above the trend, the foreign one 5 K below.
    Three pieces also have a furnace run with an ordering transition.
    """
    vault.add_origin(EXPLORE_ORIGIN, kind="locality")
    vault.add_origin(EXPLORE_OTHER_ORIGIN, kind="drill core")
    vault.add_specimen("HR1", mass="400.0+/-0.1 mg", kind="single crystal", origin=EXPLORE_ORIGIN)
    xs = {"HR1-a": 0.095, "HR1-b": 0.100, "HR1-c": 0.105, "HR1-d": 0.110, "HR1-e": 0.115, "HR1-f": 0.120}
    # wt% Fe for x in Fe(1-x)S: w_Fe = (1-x) M_Fe / ((1-x) M_Fe + M_S), IUPAC 2021 atomic weights.
    for code, x in xs.items():
        vault.add_specimen(code, parent="HR1", mass="30.00+/-0.02 mg", kind="single crystal")
        _composition(vault, code, x, "4C")
    vault.add_specimen("KD1", mass="25.00+/-0.02 mg", kind="aggregate", origin=EXPLORE_OTHER_ORIGIN)
    _composition(vault, "KD1", 0.108, "4C")
    vault.add_specimen("NX1", mass="20.00+/-0.02 mg", kind="powder", origin=EXPLORE_ORIGIN)

    jitter = [0.04, -0.03, 0.02, -0.05, 0.01, 0.03, -0.02, 0.05]
    runs: dict[str, list[int]] = {}
    planted: list[tuple[int, str, float, float, str | None]] = []
    planted_K: dict[int, float] = {}
    codes = [*xs, "KD1", "NX1"]
    for i, code in enumerate(codes):
        x = xs.get(code, 0.108 if code == "KD1" else 0.11)
        base = TREND_T0_K + TREND_SLOPE_K * (x - 0.11) + {"HR1-d": 5.0, "KD1": -5.0}.get(code, 0.0)
        runs[code] = []
        for j, day in enumerate(("2026-03-02", "2026-03-09")):
            t_k = base + jitter[(i + j) % len(jitter)] + (2.0 if code == "HR1-c" and j == 1 else 0.0)
            r = vault.ingest(data=lowt_csv(t_k, seed=10 * i + j), source_name=f"{code.lower()}_lowt_{j + 1}.csv",
                             specimen=code, kind="thermomagnetic", overrides=[f"started={day}T09:00Z", "field=0.1 T"])
            runs[code].append(r.run_id)
            planted.append((r.run_id, "low-t", t_k, PLANTED_U_K, "heating"))
            planted_K[r.run_id] = t_k
        if code == "HR1-c":
            vault.add_treatment(code, kind="anneal", at="2026-03-05T10:00Z",
                                conditions=["temperature=573 K", "duration=2 h", "atmosphere=argon"])
    plant_transitions(vault, planted, second_method_offset_K=0.1)
    ordering = []
    for i, code in enumerate(("HR1-a", "HR1-b", "HR1-c")):
        r = vault.ingest(data=thermomagnetic_csv(n=400, seed=20 + i), source_name=f"{code.lower()}_furnace.csv",
                         specimen=code, kind="thermomagnetic", overrides=[f"started=2026-03-1{i}T09:00Z"])
        ordering.append(r.run_id)
    plant_transitions(vault, [(rid, "ordering", 596.0 + i, 1.5, "heating") for i, rid in enumerate(ordering)])
    return ExploreCollection(pieces=list(xs), annealed="HR1-c", off_trend="HR1-d", foreign="KD1",
                             no_composition="NX1", runs=runs, planted_K=planted_K, ordering_runs=ordering)


def _composition(vault, code: str, x: float, superstructure: str) -> None:
    m_fe, m_s = 55.845, 32.06  # IUPAC 2021 standard atomic weights (Prohaska et al., 2022)
    fe = (1 - x) * m_fe
    total = fe + m_s
    vault.add_composition(code, method="microprobe",
                          wt={"Fe": (round(100 * fe / total, 3), 0.3), "S": (round(100 * m_s / total, 3), 0.3)},
                          superstructure=superstructure, measured="2026-02-20T12:00Z")


def explore_sqlite(folder) -> tuple[str, ExploreCollection]:
    """A SQLite vault in ``folder`` holding :func:`build_explore_collection`; returns (path, what was made)."""
    import magvault

    path = str(folder / "explore.db")
    with magvault.open(path, create=True) as vault:
        made = build_explore_collection(vault)
    return path, made


def many_curves_sqlite(folder, n_runs: int = 200, n_points: int = 801) -> tuple[str, list[int]]:
    """A SQLite vault with ``n_runs`` low-temperature runs of ``n_points`` points each (for the overlay's size limit).

    Curves of demo size (the demo's low-temperature runs have 391-801 points), spread over
    ten invented specimens, each with a planted low-T transition.
    """
    import magvault

    path = str(folder / "many.db")
    ids, planted = [], []
    with magvault.open(path, create=True) as vault:
        for s in range(10):
            vault.add_specimen(f"MC{s:02d}", mass="10.00+/-0.02 mg")
            _composition(vault, f"MC{s:02d}", 0.09 + 0.003 * s, "4C")
        for i in range(n_runs):
            code = f"MC{i % 10:02d}"
            t_k = 30.0 + 0.02 * i
            r = vault.ingest(data=lowt_csv(t_k, n=n_points, seed=i), source_name=f"mc_{i:03d}.csv", specimen=code,
                             kind="thermomagnetic", overrides=[f"started=2026-04-01T{i % 24:02d}:{i // 24:02d}Z"])
            ids.append(r.run_id)
            planted.append((r.run_id, "low-t", t_k, PLANTED_U_K, "heating"))
        plant_transitions(vault, planted)
    return path, ids
