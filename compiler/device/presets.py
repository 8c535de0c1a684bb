"""Material presets: typical g-factor and coherence times of spin qubits in
gate-defined dots, each value with the place it came from.

A dot in a device file may say ``preset: gaas``; every one of ``g``, ``t1``,
``t2`` and ``t2_star`` it does not give itself is taken from the preset, and
the source of each taken value is recorded in :attr:`Dot.sources`.

``t2`` is the Hahn-echo coherence time, ``t2_star`` the free-induction
(Ramsey) time.  Source strings say "from memory" when the number is recalled
rather than checked, and "assumed" when no published value exists: such
numbers are placeholders for planning, to be replaced by the sample's own.
Every preset satisfies T2* ≤ T2 ≤ 2·T1.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType


@dataclass(frozen=True)
class Preset:
    """Typical spin-qubit parameters of one material.

    Attributes
    ----------
    name : str
        Key used in device files.
    description : str
        Material and dot type in words.
    g : float
        Electron g-factor (signed; dimensionless).
    t1 : float, s
        Spin relaxation time.
    t2 : float, s
        Hahn-echo coherence time.
    t2_star : float, s
        Free-induction (Ramsey) dephasing time.
    sources : dict
        Field name (``g``, ``t1``, ``t2``, ``t2_star``) -> where the value
        comes from.
    """

    name: str
    description: str
    g: float
    t1: float
    t2: float
    t2_star: float
    sources: MappingProxyType
    # spin–valley values (None: not part of this preset): spin_orbit and
    # valley_splitting in Hz (E/h), valley_g, valley_t1 in s
    spin_orbit: float | None = None
    valley_splitting: float | None = None
    valley_g: float | None = None
    valley_t1: float | None = None

    def extra(self, field: str) -> float | None:
        """A spin–valley value of the preset, or None."""
        return getattr(self, field)

    def value(self, field: str) -> float:
        """The preset value of ``field`` (g in 1, times in s)."""
        return float(getattr(self, field))

    def source(self, field: str) -> str:
        """The source string of ``field``."""
        return self.sources[field]


FIELDS = ("g", "t1", "t2", "t2_star")


VALLEY_FIELDS = ("spin_orbit", "valley_splitting", "valley_g", "valley_t1")


def _preset(name: str, description: str, g: float, t1: float, t2: float, t2_star: float,
            sources: dict[str, str], **valley) -> Preset:
    assert set(sources) == set(FIELDS) | set(valley), name
    assert set(valley) <= set(VALLEY_FIELDS), name
    assert 0 < t2_star <= t2 <= 2 * t1, name
    return Preset(name, description, g, t1, t2, t2_star, MappingProxyType(dict(sources)),
                  **valley)


_GAAS_KOPPENS = "Koppens, Nowack & Vandersypen, PRL 100, 236802 (2008), at 70 mT"
_KAWAKAMI = "Kawakami et al., Nat. Nanotechnol. 9, 666 (2014)"
_VELDHORST = "Veldhorst et al., Nat. Nanotechnol. 9, 981 (2014)"

_BANSZERUS_SO = ("Banszerus et al., PRL 124, 177701 (2020): Δ_SO = 40–80 µeV, tunable with the "
                 "displacement field; 65 µeV taken as typical of single-electron dots (value "
                 "from memory)")
_KURZMANN = "Kurzmann et al., PRL 123, 026803 (2019): g_v ≈ 36, gate-tunable (value from memory)"
_MEV = 1e-3 * 1.602176634e-19 / 6.62607015e-34     # Hz per meV (E/h, exact SI constants)

_ALL = (
    _preset(
        "graphene", "single-layer graphene dot (e.g. etched ribbon), valley degeneracy lifted",
        g=2.0, t1=100e-6, t2=10e-6, t2_star=0.5e-6,
        sources={
            "g": "Güttinger et al., PRL 105, 116801 (2010) (volume/page from memory)",
            "t1": "assumed: no published spin T1 of single-layer graphene dots known",
            "t2": "assumed: no published Hahn-echo time of single-layer graphene dots known",
            "t2_star": "assumed: no published T2* of single-layer graphene dots known",
        },
    ),
    _preset(
        "graphene_edge", "edge-defined (etched, armchair-like) single-layer graphene dot: "
        "strong K–K′ mixing lifts the valley degeneracy and quenches the first-order "
        "spin–orbit shift",
        g=2.0, t1=100e-6, t2=10e-6, t2_star=0.5e-6,
        spin_orbit=0.042 * _MEV, valley_splitting=1.0 * _MEV,
        sources={
            "g": "Güttinger et al., PRL 105, 116801 (2010) (volume/page from memory)",
            "t1": "assumed: no published spin T1 of single-layer graphene dots known",
            "t2": "assumed: no published Hahn-echo time of single-layer graphene dots known",
            "t2_star": "assumed: no published T2* of single-layer graphene dots known",
            "spin_orbit": "Sichau et al., PRL 122, 046403 (2019): intrinsic Kane–Mele gap "
                          "≈ 42 µeV (value from memory)",
            "valley_splitting": "assumed: 1 meV, strong K–K′ mixing at the edges "
                                "(Trauzettel, Bulaev, Loss & Burkard, Nat. Phys. 3, 192 (2007))",
        },
    ),
    _preset(
        "bilayer_graphene", "gate-defined bilayer-graphene dot: four spin–valley levels "
        "(Kane–Mele gap, valley g-factor)",
        g=2.0, t1=200e-6, t2=20e-6, t2_star=2e-6,
        spin_orbit=0.065 * _MEV, valley_g=36.0, valley_t1=0.5,
        sources={
            "spin_orbit": _BANSZERUS_SO,
            "valley_g": _KURZMANN,
            "valley_t1": "valley lifetimes above 0.5 s in bilayer-graphene dots (Garreis et al., "
                         "PRL 126, 147703 (2021); value and reference from memory)",
            "g": "Banszerus et al., Nat. Commun. (2021): g_s ≈ 2",
            "t1": "Banszerus et al., Nat. Commun. 13, 3637 (2022): T1 > 200 µs at 1.9 T "
                  "(lower bound; Gächter et al., PRX Quantum 3, 020343 (2022) report up to 50 ms)",
            "t2": "assumed: no published Hahn-echo time of bilayer-graphene spin qubits",
            "t2_star": "assumed: no published T2* of bilayer-graphene spin qubits",
        },
    ),
    _preset(
        "gaas", "GaAs/AlGaAs gate-defined dot (electron; hyperfine-limited)",
        g=-0.44, t1=1e-3, t2=0.5e-6, t2_star=37e-9,
        sources={
            "g": "bulk GaAs value; in dots shifted by 5-10 % and anisotropic "
                 "(Stano et al., arXiv:1808.03963)",
            "t1": "from memory: millisecond scale at ~1 T, e.g. Elzerman et al., "
                  "Nature 430, 431 (2004)",
            "t2": _GAAS_KOPPENS,
            "t2_star": _GAAS_KOPPENS,
        },
    ),
    _preset(
        "si_natural", "natural-silicon Si/SiGe dot (4.7 % 29Si), with its valley splitting",
        g=2.0, t1=10e-3, t2=40e-6, t2_star=1e-6,
        valley_splitting=0.08 * _MEV, spin_orbit=0.0003 * _MEV, valley_t1=1e-6,
        sources={
            "valley_splitting": "tens to hundreds of µeV in Si/SiGe, device-dependent; 80 µeV "
                                "assumed as typical (from memory)",
            "spin_orbit": "spin–valley coupling ≈ 0.3 µeV assumed (order of the values of Yang "
                          "et al., Nat. Commun. 4, 2069 (2013); from memory)",
            "valley_t1": "assumed: 1 µs valley relaxation, placeholder for the hotspot",
            "g": _KAWAKAMI + ": g ≈ 2",
            "t1": "from memory: milliseconds to seconds in Si/SiGe at ~1 T; "
                  "10 ms taken as typical",
            "t2": _KAWAKAMI,
            "t2_star": _KAWAKAMI,
        },
    ),
    _preset(
        "si28", "isotopically purified 28Si MOS dot, with its valley splitting",
        g=2.0, t1=100e-3, t2=1.2e-3, t2_star=120e-6,
        valley_splitting=0.5 * _MEV, spin_orbit=0.0003 * _MEV, valley_t1=1e-6,
        sources={
            "valley_splitting": "0.3–0.8 meV, gate-tunable, in Si-MOS (Yang et al., Nat. Commun. "
                                "4, 2069 (2013)); 0.5 meV assumed",
            "spin_orbit": "spin–valley coupling ≈ 0.3 µeV assumed (order of Yang et al. 2013; "
                          "from memory)",
            "valley_t1": "assumed: 1 µs valley relaxation, placeholder for the hotspot",
            "g": "from memory: g ≈ 2 in Si MOS dots (small anisotropic shifts)",
            "t1": "from memory: tens of ms to seconds in Si MOS at ~1 T; "
                  "100 ms taken as typical",
            "t2": _VELDHORST + ": Hahn echo 1.2 ms (value from memory; the CPMG T2 is 28 ms)",
            "t2_star": _VELDHORST,
        },
    ),
)

PRESETS: MappingProxyType = MappingProxyType({p.name: p for p in _ALL})
"""Material name -> :class:`Preset` (read-only)."""
