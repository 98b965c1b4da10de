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
