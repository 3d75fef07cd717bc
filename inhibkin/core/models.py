"""Reversible steady-state rate laws, as data.

Every model is one :class:`RateLaw` entry in :data:`MODELS`: its name, its parameter
names, a vectorised rate function, its analytic Jacobian and the models it nests in.
All five are special cases of the mixed (general linear) rate law

    v = vmax*S / (km*(1 + I/kic) + S*(1 + I/kiu))

with kic (inhibitor binding free enzyme) or kiu (inhibitor binding the ES complex)
sent to infinity, or tied (kic = kiu = ki for noncompetitive). Adding a mechanism means
adding one entry here; the fitting, comparison and batched engine read everything
they need from it.

Each parameter has a *role* (:data:`ROLES`): the data axis that sets its bounds, its
starting value and its "determined" rule. ``rate`` (vmax) is set by the rates,
``substrate`` (km) by the substrate levels, ``inhibitor`` (kic, kiu, ki) by the inhibitor
levels. The starts (:mod:`inhibkin.core.starts`), the bounds and the "determined" rule
(:mod:`inhibkin.core.determined`) read the roles, so both solvers treat a new constant
alike without a list of names of their own.

Units: S and km share the substrate's unit, I, kic, kiu and ki the inhibitor's; v and
vmax share the rate's unit. Nothing here converts units.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

__all__ = ["RateLaw", "Derived", "MODELS", "MODEL_NAMES", "INHIBITION_MODELS",
           "ONE_CONSTANT_MODELS", "EXTENDED_MODELS", "ROLES", "FAMILIES", "Family", "get_model",
           "nested_pairs", "nested_start", "extension_of", "ratio_tie"]

#: The roles a parameter can have: the data axis that sets its bounds, start and
#: "determined" rule. ``substrate_inhibition`` (ksi) is set by the substrate levels like
#: km, but a ksi past the tested range is reported as a lower bound and leaves vmax alone.
#: ``enzyme`` ([E] of the tight-binding laws, in the inhibitor's unit) is set by the
#: inhibitor levels; ``partial`` (beta, dimensionless, below 1) by how far inhibition
#: levels off; both are reported as upper bounds when the data cannot place them.
ROLES = ("rate", "substrate", "inhibitor", "substrate_inhibition", "enzyme", "partial")


@dataclass(frozen=True)
class Derived:
    """A quantity derived from two fitted constants as their ratio, e.g. alpha = kiu/kic.

    Its interval is that of the difference of the two log-parameters (the solvers give
    both); it is determined only when both constants are.
    """

    name: str
    numerator: str
    denominator: str


@dataclass(frozen=True)
class RateLaw:
    """One reversible inhibition mechanism.

    Parameters
    ----------
    name : str
        Mechanism name, one of the trade's terms.
    param_names : tuple of str
        Parameter names in the order the rate and Jacobian functions take them.
    rate : callable
        ``rate(s, i, *params) -> v``, vectorised over ``s`` and ``i``.
    jacobian : callable
        ``jacobian(s, i, *params) -> array of shape (n, k)``: dv/dparam, one column
        per parameter in ``param_names`` order.
    nests_in : tuple of str
        Names of the larger models this one is a special case of (one constraint
        or limit away, or more).
    equation : str
        The rate law in plain text, for reports.
    roles : tuple of str
        One entry of :data:`ROLES` per parameter, in ``param_names`` order.
    ties : tuple of (str, tuple of str)
        Constants that stand for several of a larger model's (noncompetitive's ki is
        kic = kiu of mixed): the constraint that makes the nesting. A constant of the
        larger model that is neither shared nor tied is sent to infinity.
    derived : tuple of Derived
        Quantities derived from the fitted constants (mixed: alpha = kiu/kic).
    ranking : tuple of str
        The constants a ranking by Ki reads (mixed: the tighter of kic and kiu).
    alpha_edges : tuple of {"low", "high"}
        Where the name places alpha = kiu/kic of mixed, as the edges the data must
        reject before the name is called (rule 4 of :mod:`inhibkin.core.compare`): "high"
        for alpha above ``alpha_factor`` (competitive), "low" for alpha below its
        inverse (uncompetitive), both for between them (noncompetitive).
    family : str
        ``"classical"`` (the five reversible laws, fitted by default) or the
        :data:`FAMILIES` entry the law belongs to (``"substrate_inhibition"``,
        ``"tight_binding"``, ``"partial"``); extended laws are fitted only when rule 5
        of :mod:`inhibkin.core.compare` asks for them.
    extends : str, optional
        The classical law this one reduces to when its extra constant reaches its limit
        (ksi -> inf, [E] -> 0, beta -> 0).
    label : str, optional
        How a verdict names the law ("competitive with substrate inhibition").
    """

    name: str
    param_names: tuple[str, ...]
    rate: Callable[..., np.ndarray]
    jacobian: Callable[..., np.ndarray]
    nests_in: tuple[str, ...]
    equation: str
    roles: tuple[str, ...] = ()
    ties: tuple[tuple[str, tuple[str, ...]], ...] = ()
    derived: tuple[Derived, ...] = ()
    ranking: tuple[str, ...] = ()
    alpha_edges: tuple[str, ...] = ()
    family: str = "classical"
    extends: str | None = None
    label: str | None = None

    def __post_init__(self):
        if len(self.roles) != len(self.param_names) or not set(self.roles) <= set(ROLES):
            raise ValueError(f"{self.name}: give one role of {ROLES} per parameter")

    @property
    def n_params(self) -> int:
        """Number of fitted parameters."""
        return len(self.param_names)

    def with_role(self, role: str) -> tuple[str, ...]:
        """The parameters of ``role``, in parameter order."""
        return tuple(p for p, r in zip(self.param_names, self.roles) if r == role)

    @property
    def inhibition_constants(self) -> tuple[str, ...]:
        """The parameters whose role is ``inhibitor`` (kic, kiu, ki)."""
        return self.with_role("inhibitor")

    @property
    def column_names(self) -> tuple[str, ...]:
        """The rows of a parameter table: the parameters, then the derived quantities."""
        return self.param_names + tuple(d.name for d in self.derived)

    def stands_for(self, constant: str) -> tuple[str, ...]:
        """The constants of a larger model that ``constant`` stands for: itself, or those
        of its tie (noncompetitive's ki stands for kic and kiu of mixed)."""
        return dict(self.ties).get(constant, (constant,))


def _none_rate(s, i, vmax, km):
    return vmax * s / (km + s)


def _none_jac(s, i, vmax, km):
    d = km + s
    return np.stack([s / d, -vmax * s / d**2], axis=-1)


def _mixed_rate(s, i, vmax, km, kic, kiu):
    return vmax * s / (km * (1 + i / kic) + s * (1 + i / kiu))


def _mixed_jac(s, i, vmax, km, kic, kiu):
    a = 1 + i / kic
    d = km * a + s * (1 + i / kiu)
    g = vmax * s / d**2
    return np.stack(
        [s / d, -g * a, g * km * i / kic**2, g * s * i / kiu**2],
        axis=-1,
    )


def _competitive_rate(s, i, vmax, km, kic):
    return vmax * s / (km * (1 + i / kic) + s)


def _competitive_jac(s, i, vmax, km, kic):
    a = 1 + i / kic
    d = km * a + s
    g = vmax * s / d**2
    return np.stack([s / d, -g * a, g * km * i / kic**2], axis=-1)


def _uncompetitive_rate(s, i, vmax, km, kiu):
    return vmax * s / (km + s * (1 + i / kiu))


def _uncompetitive_jac(s, i, vmax, km, kiu):
    d = km + s * (1 + i / kiu)
    g = vmax * s / d**2
    return np.stack([s / d, -g, g * s * i / kiu**2], axis=-1)


def _noncompetitive_rate(s, i, vmax, km, ki):
    return vmax * s / ((km + s) * (1 + i / ki))


def _noncompetitive_jac(s, i, vmax, km, ki):
    a = 1 + i / ki
    d = (km + s) * a
    g = vmax * s / d**2
    return np.stack([s / d, -g * a, g * (km + s) * i / ki**2], axis=-1)


_RATE, _SUBSTRATE, _INHIBITOR, _SUBSTRATE_INHIBITION, _ENZYME, _PARTIAL = ROLES


def _with_substrate_inhibition(law: RateLaw):
    """Rate and Jacobian of ``law`` with a dead-end SES complex (constant ksi, last).

    The classical denominator D gains S**2/ksi: v = vmax*S/(D + S**2/ksi). Written with
    r = v/v_c = 1/(1 + S*v_c/(vmax*ksi)), v_c the classical rate, so it stays finite at
    S = 0 and every classical law gets its extension from one definition.
    """

    def rate(s, i, *params):
        *classical, ksi = params
        vc = law.rate(s, i, *classical)
        return vc / (1 + s * vc / (classical[0] * ksi))

    def jacobian(s, i, *params):
        *classical, ksi = params
        vmax = classical[0]
        vc = law.rate(s, i, *classical)
        r2 = (1 / (1 + s * vc / (vmax * ksi))) ** 2
        jac = law.jacobian(s, i, *classical) * r2[..., None]
        extra = r2 * vc**2 * s / vmax
        jac[..., 0] += extra / (vmax * ksi)
        return np.concatenate([jac, (extra / ksi**2)[..., None]], axis=-1)

    return rate, jacobian


def _with_tight_binding(law: RateLaw):
    """Rate and Jacobian of ``law`` with inhibitor depletion (active enzyme [E], last).

    The classical law is v_c = v0/(1 + I/K_app), v0 = vmax*S/(km + S) and K_app the
    mechanism's apparent constant (kic*(1 + S/km) for competitive). With the inhibitor
    bound to enzyme taken out of the free inhibitor, the fraction of activity left is the
    Morrison quadratic (Morrison 1969, BBA 185:269):

        v/v0 = 1 - (E + I + K - sqrt((E + I + K)**2 - 4*E*I)) / (2*E),   K = K_app

    written with u = I/K = v0/v_c - 1 (zero without inhibitor) and multiplied through
    by u, so that it stays finite as E -> 0 (the classical law) and as K -> inf:
    v/v0 = 1 - 2*I*u / (I + u*(E + I) + R), R**2 = u**2*(E - I)**2 + I**2 + 2*u*I*(E + I).
    [E] shares the inhibitor's unit.
    """
    none = _none_rate, _none_jac

    def parts(s, i, params):
        *classical, enzyme = params
        v0 = none[0](s, i, *classical[:2])
        vc = law.rate(s, i, *classical)
        with np.errstate(divide="ignore", invalid="ignore"):
            u = np.where(i > 0, v0 / vc - 1.0, 0.0)
        u = np.maximum(u, 0.0)
        root = np.sqrt(u**2 * (enzyme - i) ** 2 + i**2 + 2 * u * i * (enzyme + i))
        den = i + u * (enzyme + i) + root
        with np.errstate(divide="ignore", invalid="ignore"):
            fraction = np.where(i > 0, 1.0 - 2 * i * u / den, 1.0)
        return classical, enzyme, v0, vc, u, root, den, fraction

    def rate(s, i, *params):
        _, _, v0, _, _, _, _, fraction = parts(s, i, params)
        return v0 * fraction

    def jacobian(s, i, *params):
        classical, enzyme, v0, vc, u, root, den, fraction = parts(s, i, params)
        k = len(classical)
        j0 = np.zeros(np.shape(v0) + (k,))
        j0[..., :2] = none[1](s, i, *classical[:2])
        jc = law.jacobian(s, i, *classical)
        with np.errstate(divide="ignore", invalid="ignore"):
            positive = i > 0
            # d fraction / du = -2*I**2/(R*den) (= -1 at u = 0, the classical slope).
            d_u = np.where(positive, -2 * i**2 / (root * den), 0.0)
            du = np.where(positive[..., None],
                          (j0 * vc[..., None] - v0[..., None] * jc) / vc[..., None] ** 2, 0.0)
            # d fraction / dE = 2*I*u*(d den / dE)/den**2.
            d_den_e = u + (u**2 * (enzyme - i) + u * i) / root
            d_e = np.where(positive, 2 * i * u * d_den_e / den**2, 0.0)
        jac = j0 * fraction[..., None] + (v0 * d_u)[..., None] * du
        return np.concatenate([jac, (v0 * d_e)[..., None]], axis=-1)

    return rate, jacobian


def _with_partial_turnover(law: RateLaw):
    """Rate and Jacobian of ``law`` when ESI still turns over, at beta*kcat (beta last).

    Rapid equilibrium with a productive ESI: v = vmax*S*(1 + beta*I/kiu)/D, D the
    classical denominator, so v = v_c*(1 + beta*I/kiu); beta -> 0 gives the dead-end law
    back (Segel, *Enzyme Kinetics*, 1975, hyperbolic mixed-type inhibition; `from
    memory`). kiu is the constant of ``law`` that stands for mixed's kiu (ki for
    noncompetitive).
    """
    where = next(j for j, p in enumerate(law.param_names) if "kiu" in law.stands_for(p))

    def rate(s, i, *params):
        *classical, beta = params
        return law.rate(s, i, *classical) * (1 + beta * i / classical[where])

    def jacobian(s, i, *params):
        *classical, beta = params
        kiu = classical[where]
        vc = law.rate(s, i, *classical)
        gain = 1 + beta * i / kiu
        jac = law.jacobian(s, i, *classical) * gain[..., None]
        jac[..., where] -= vc * beta * i / kiu**2
        return np.concatenate([jac, (vc * i / kiu)[..., None]], axis=-1)

    return rate, jacobian


@dataclass(frozen=True)
class Family:
    """A way the chemistry leaves the classical laws: one constant added to each law.

    Attributes
    ----------
    name : str
        The family (``RateLaw.family`` of its laws).
    parameter, role : str
        The constant added (last) and its role in :data:`ROLES`.
    suffix : str
        Appended to the classical name (``competitive_tb``).
    label : str
        How a verdict names the law; ``{law}`` is the classical name.
    wrap : callable
        ``wrap(law) -> (rate, jacobian)``.
    applies : callable
        ``applies(law) -> bool``: which classical laws have this extension.
    limit : str
        Where the constant gives the classical law back, for the reason of a verdict.
    """

    name: str
    parameter: str
    role: str
    suffix: str
    label: str
    wrap: Callable
    applies: Callable
    limit: str


#: The extended families, in the order rule 5 tries them (:func:`inhibkin.core.compare.
#: decide_extended` keeps the one with the lowest AICc among those that pass).
FAMILIES: dict[str, Family] = {f.name: f for f in (
    Family("substrate_inhibition", "ksi", _SUBSTRATE_INHIBITION, "_si",
           "{law} with substrate inhibition", _with_substrate_inhibition,
           lambda law: True, "ksi -> inf"),
    Family("tight_binding", "enzyme", _ENZYME, "_tb", "{law}, tight binding",
           _with_tight_binding, lambda law: bool(law.inhibition_constants), "[E] -> 0"),
    Family("partial", "beta", _PARTIAL, "_partial", "partial {law}",
           _with_partial_turnover,
           lambda law: any("kiu" in law.stands_for(p) for p in law.inhibition_constants),
           "beta -> 0"),
)}


def _family_name(law_name: str, family: Family) -> str:
    if law_name == "none" and family.name == "substrate_inhibition":
        return "substrate_inhibition"
    return f"{law_name}{family.suffix}"


def _extended_entry(law: RateLaw, family: Family, classical: dict) -> RateLaw:
    """The ``family`` extension of a classical entry."""
    rate, jacobian = family.wrap(law)
    name = _family_name(law.name, family)
    label = ("substrate inhibition" if name == "substrate_inhibition"
             else family.label.format(law=law.name))
    # Nested in the extension of every law the classical one nests in (when it has one).
    nests_in = tuple(_family_name(n, family) for n in law.nests_in
                     if n in classical and family.applies(classical[n]))
    equation = {"substrate_inhibition":
                law.equation.replace("vmax*S / (", "vmax*S / (S**2/ksi + ", 1),
                "tight_binding": f"{law.equation}, with I the free inhibitor: Morrison "
                                 "quadratic in [E] = enzyme",
                "partial": f"{law.equation.replace('v = ', 'v = (1 + beta*I/kiu) * ', 1)}"
                }[family.name]
    return RateLaw(name, law.param_names + (family.parameter,), rate, jacobian,
                   nests_in=nests_in, equation=equation, roles=law.roles + (family.role,),
                   ties=law.ties, derived=law.derived, ranking=law.ranking,
                   alpha_edges=law.alpha_edges, family=family.name, extends=law.name,
                   label=label)


MODELS: dict[str, RateLaw] = {
    m.name: m
    for m in (
        RateLaw(
            "none", ("vmax", "km"), _none_rate, _none_jac,
            nests_in=("competitive", "uncompetitive", "noncompetitive", "mixed"),
            equation="v = vmax*S / (km + S)",
            roles=(_RATE, _SUBSTRATE),
        ),
        RateLaw(
            "competitive", ("vmax", "km", "kic"), _competitive_rate, _competitive_jac,
            nests_in=("mixed",),
            equation="v = vmax*S / (km*(1 + I/kic) + S)",
            roles=(_RATE, _SUBSTRATE, _INHIBITOR), ranking=("kic",), alpha_edges=("high",),
        ),
        RateLaw(
            "uncompetitive", ("vmax", "km", "kiu"), _uncompetitive_rate, _uncompetitive_jac,
            nests_in=("mixed",),
            equation="v = vmax*S / (km + S*(1 + I/kiu))",
            roles=(_RATE, _SUBSTRATE, _INHIBITOR), ranking=("kiu",), alpha_edges=("low",),
        ),
        RateLaw(
            "noncompetitive", ("vmax", "km", "ki"), _noncompetitive_rate, _noncompetitive_jac,
            nests_in=("mixed",),
            equation="v = vmax*S / ((km + S)*(1 + I/ki))",
            roles=(_RATE, _SUBSTRATE, _INHIBITOR), ties=(("ki", ("kic", "kiu")),),
            ranking=("ki",), alpha_edges=("low", "high"),
        ),
        RateLaw(
            "mixed", ("vmax", "km", "kic", "kiu"), _mixed_rate, _mixed_jac,
            nests_in=(),
            equation="v = vmax*S / (km*(1 + I/kic) + S*(1 + I/kiu))",
            roles=(_RATE, _SUBSTRATE, _INHIBITOR, _INHIBITOR),
            derived=(Derived("alpha", "kiu", "kic"),), ranking=("kic", "kiu"),
        ),
    )
}

#: The classical laws: fitted by default, the candidates of the classical verdict.
MODEL_NAMES: tuple[str, ...] = tuple(MODELS)
# Each classical law extended by each family (the family's constant at its limit gives
# it back); the classical law nests in the extension of itself and of every law it nests
# in (none nests in competitive_tb: kic -> inf, whatever [E]).
_CLASSICAL = dict(MODELS)
for _family in FAMILIES.values():
    for _name in MODEL_NAMES:
        if not _family.applies(_CLASSICAL[_name]):
            continue
        _extended = _extended_entry(_CLASSICAL[_name], _family, _CLASSICAL)
        MODELS[_extended.name] = _extended
for _name in MODEL_NAMES:
    _inside = (_name, *_CLASSICAL[_name].nests_in)
    _more = tuple(_family_name(n, f) for f in FAMILIES.values() for n in _inside
                  if f.applies(_CLASSICAL[n]))
    MODELS[_name] = RateLaw(**{**MODELS[_name].__dict__,
                               "nests_in": MODELS[_name].nests_in + _more})
#: The extended laws, tried only when the classical verdict fails the lack-of-fit test.
EXTENDED_MODELS: tuple[str, ...] = tuple(n for n in MODELS if n not in MODEL_NAMES)
INHIBITION_MODELS: tuple[str, ...] = tuple(n for n in MODEL_NAMES
                                           if MODELS[n].inhibition_constants)
#: Models with one inhibition constant that nest in a larger one: the candidates the
#: verdict chooses between by AICc (:mod:`inhibkin.core.compare`).
ONE_CONSTANT_MODELS: tuple[str, ...] = tuple(
    n for n in MODEL_NAMES if len(MODELS[n].inhibition_constants) == 1)


def extension_of(name: str, family: str = "substrate_inhibition") -> str | None:
    """The name of the ``family`` extension of the classical law ``name`` (None if none:
    ``none`` has no tight-binding or partial form, competitive no partial one)."""
    for law in MODELS.values():
        if law.extends == name and law.family == family:
            return law.name
    return None


def general_law(law: RateLaw) -> RateLaw:
    """The most general law of ``law``'s family (mixed, or mixed's extension by the
    family), in which every law of the family nests; :func:`nested_start` with ``far``
    = inf gives a law's parameters as that law's."""
    name = "mixed" if law.family == "classical" else extension_of("mixed", law.family)
    return MODELS[name]


def get_model(name: str) -> RateLaw:
    """Return the rate law called ``name``.

    Raises
    ------
    KeyError
        With the list of known names, when ``name`` is not one of them.
    """
    try:
        return MODELS[name]
    except KeyError:
        raise KeyError(f"unknown mechanism {name!r}; known: {', '.join(MODELS)}") from None


def nested_pairs(names=MODEL_NAMES) -> list[tuple[str, str]]:
    """Every (smaller, larger) pair among ``names`` in which the smaller nests in the larger."""
    return [(a, b) for a in names for b in MODELS[a].nests_in if b in names]


def nested_start(small: str, values, large: str, far) -> dict:
    """A start for ``large`` at the solution ``values`` of the nested model ``small``.

    Shared constants keep their values, a tied constant (noncompetitive's ki) sets every
    constant it stands for, and a constant ``small`` lacks starts at ``far`` (the limit
    that makes the nesting: the constant sent towards infinity). Starting the larger
    model there guarantees its SSR is no larger than the nested one's.

    Parameters
    ----------
    small, large : str
        Model names, ``small`` nested in ``large``.
    values : mapping of str to float or array
        The nested model's estimates.
    far : float or array
        Where a missing constant starts.
    """
    tied = {target: source for source, targets in MODELS[small].ties for target in targets}
    out = {}
    for name in MODELS[large].param_names:
        if name in values:
            out[name] = values[name]
        elif name in tied:
            out[name] = values[tied[name]]
        else:
            out[name] = far
    return out


def ratio_tie(law: RateLaw, value: float):
    """The map theta = tie @ phi + offset that holds the law's derived ratio at ``value``.

    theta are the law's log-parameters; the ratio's numerator is tied to its
    denominator (log kiu = log kic + log value for mixed's alpha), every other
    parameter is free. Both solvers' fixed-alpha fits (rule 4 of
    :mod:`inhibkin.core.compare`) use it.

    Returns
    -------
    tie : numpy.ndarray, shape (k, k − 1)
    offset : numpy.ndarray, shape (k,)
    """
    (ratio,) = law.derived
    names = law.param_names
    low, high = names.index(ratio.denominator), names.index(ratio.numerator)
    tie = np.delete(np.eye(len(names)), high, axis=1)
    tie[high, low] = 1.0
    offset = np.zeros(len(names))
    offset[high] = np.log(value)
    return tie, offset
