"""The demo's known answer: true reference velocities conditioned on the box budgets."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from sectionkit.budget import SV, Q
from sectionkit.config import BoxSpec, SectionNet
from sectionkit.demo.ocean import generate_section, station_distances
from sectionkit.demo.scenario import DemoScenario, LineSpec, _pick, _rng, demo_config
from sectionkit.errors import ComputationError
from sectionkit.geometry import pair_along_line_distance
from sectionkit.inverse import interface_transfers, transfer_anomaly
from sectionkit.labels import constraint_label
from sectionkit.operator import SectionOperator, build_operator
from sectionkit.state import BudgetState
from sectionkit.study import Study

# ---------------------------------------------------------------------------
# truth


@dataclass
class DemoTruth:
    """The demo's known answer.

    Attributes
    ----------
    scenario : DemoScenario
        Parameters used.
    sections : dict of str -> xr.Dataset
        Canonical sections by line name.
    operators : dict of str -> SectionOperator
        Transport operators built with ``demo.toml``'s settings.
    ref_pressure : dict of str -> ndarray (pair,)
        Reference pressure actually used per pair, dbar.
    offset : dict of str -> ndarray (pair,)
        Reference offset of ``demo.toml``'s level of no motion, m s^-1.
    b_draw : dict of str -> ndarray (pair,)
        The prior draw before conditioning, m s^-1.
    b_true : dict of str -> ndarray (pair,)
        True reference velocity: the absolute velocity at the reference level,
        i.e. the adjustment to add to ``demo.toml``'s reference, m s^-1.
    ekman : dict of str -> ndarray (pair,)
        Ekman volume transport per pair, m^3 s^-1.
    diapycnal : ndarray (interface,)
        True transfer across each interface, Sv (lighter to denser).
    known : ndarray (class,)
        Known (strait) inflow per class, Sv.
    strait_salinity : float
        Absolute Salinity carried by the strait in the truth, g kg^-1.
    box : BoxSpec, optional
        The box of ``demo.toml`` (which line enters, which leaves).
    """

    scenario: DemoScenario
    sections: dict[str, xr.Dataset]
    operators: dict[str, SectionOperator]
    ref_pressure: dict[str, np.ndarray]
    offset: dict[str, np.ndarray]
    b_draw: dict[str, np.ndarray]
    b_true: dict[str, np.ndarray]
    ekman: dict[str, np.ndarray]
    diapycnal: np.ndarray
    known: np.ndarray
    strait_salinity: float
    box: BoxSpec | None = None

    def sign(self, name: str) -> float:
        """+1 for a line whose positive transport enters the box, -1 for one leaving it."""
        if self.box is not None:
            return self.box.sign(name)
        return 1.0 if self.scenario.line(name).into_box else -1.0

    def class_transports(self, name: str, quantity: str = "mass", *, true: bool = True):
        """Class transports of one line, summed over pairs.

        Parameters
        ----------
        name : str
            Line name.
        quantity : {"volume", "mass", "salt", "heat"}
            Transported quantity.
        true : bool
            With ``b_true`` (True) or with the reference of ``demo.toml`` alone.

        Returns
        -------
        ndarray (class,)
            In the operator's units (m^3 s^-1 for volume and mass/RHO0,
            g kg^-1 m^3 s^-1 for salt, W for heat), positive northward.
        """
        op = self.operators[name]
        b = self.b_true[name] if true else 0.0
        return op.transports(self.offset[name], b, ekman=self.ekman[name])[Q[quantity]].sum(
            axis=0
        )

    def ekman_by_class(self, name: str, quantity: str = "mass") -> np.ndarray:
        """Ekman part of a line's class transports, in the operator's units."""
        op = self.operators[name]
        return (self.ekman[name][:, None] * op.ekman_share[Q[quantity]]).sum(axis=0)

    def box_inflow(self, quantity: str = "mass") -> np.ndarray:
        """Net inflow of each class through the lines (Ekman included), operator units."""
        total = 0.0
        for line in self.scenario.lines:
            total = total + self.sign(line.name) * self.class_transports(line.name, quantity)
        return np.asarray(total)

    def mass_residual(self) -> np.ndarray:
        """Class mass budgets of the box with the truth, Sv (zero to round-off).

        sections (in) + strait + W[i-1] - W[i].
        """
        w = np.concatenate([[0.0], self.diapycnal, [0.0]])
        return self.box_inflow("mass") / SV + self.known + w[:-1] - w[1:]

    def salt_residual(self) -> float:
        """Salt budget of the whole box with the truth, g kg^-1 Sv.

        The strait carries ``strait_salinity``. Not forced to zero: the
        truth conserves mass, and its salt imbalance stands for the
        freshwater exchange and diapycnal salt fluxes a mass-only truth leaves
        out.
        """
        return float(self.box_inflow("salt").sum() / SV + self.known.sum() * self.strait_salinity)

    def class_mean_salinity(self) -> np.ndarray:
        """Area-weighted mean salinity of each class over both lines, g kg^-1.

        The salinity of the salt budgets (Preformed Salinity S* by default,
        :attr:`SectionOperator.budget_salinity`).
        """
        num = 0.0
        den = 0.0
        for line in self.scenario.lines:
            op = self.operators[line.name]
            w = op.weights * op.pairs["distance"].values[:, None, None]  # (pair, class, level) m^2
            sa = np.nan_to_num(op.budget_salinity)[:, None, :]
            num = num + (w * sa).sum(axis=(0, 2))
            den = den + w.sum(axis=(0, 2))
        return np.asarray(num / den)

    def salt_anomaly_parts(self) -> tuple[np.ndarray, np.ndarray]:
        """Class salt-anomaly budget of the box with the truth, Sv g kg^-1.

        The usual layered model: each class's salt transport minus its box
        mean salinity times its mass transport; a diapycnal transfer carries
        the mean of the two adjacent class means; the strait carries its
        class mean (no anomaly).

        Returns
        -------
        sections : ndarray (class,)
            Net salt-anomaly inflow through the lines (Ekman included).
        transfers : ndarray (class,)
            Salt anomaly brought by the diapycnal transfers.
        """
        s_mean = self.class_mean_salinity()
        sections = (self.box_inflow("salt") - s_mean * self.box_inflow("mass")) / SV
        transfers = transfer_anomaly(interface_transfers(s_mean.size), s_mean) @ self.diapycnal
        return sections, transfers

    def salt_anomaly_residual(self) -> np.ndarray:
        """Imbalance of each class salt-anomaly budget under the layered model, Sv g kg^-1."""
        sections, transfers = self.salt_anomaly_parts()
        return sections + transfers


def build_demo_operators(
    scenario: DemoScenario, sections: dict[str, xr.Dataset] | None = None
) -> dict[str, SectionOperator]:
    """Transport operators of the demo lines with ``demo.toml``'s settings.

    Parameters
    ----------
    scenario : DemoScenario
        Parameters (interfaces, bottom triangle, Ekman depth).
    sections : dict of str -> xr.Dataset, optional
        Canonical sections (generated when not given).

    Returns
    -------
    dict of str -> SectionOperator
    """
    if sections is None:
        sections = {line.name: generate_section(line.name, scenario) for line in scenario.lines}
    return {
        name: build_operator(
            ds,
            list(scenario.interfaces),
            list(scenario.layer_names),
            bottom_triangle=scenario.bottom_triangle,
            ekman_depth=scenario.ekman_depth,
        )
        for name, ds in sections.items()
    }


def _prior(scenario: DemoScenario, line: LineSpec, op: SectionOperator):
    """Prior mean (m s^-1) and covariance (m^2 s^-2) of a line's reference velocities."""
    x = pair_along_line_distance(op.pairs["distance"].values) / 1e3 + station_distances(line)[0]
    mean = -line.dwbc_speed * np.exp(-(((x - line.dwbc_offset) / line.dwbc_width) ** 2))
    std = scenario.prior_speed_interior + (
        scenario.prior_speed_boundary - scenario.prior_speed_interior
    ) * np.exp(-x / scenario.prior_boundary_scale)
    corr = np.exp(-0.5 * ((x[:, None] - x[None, :]) / scenario.prior_length) ** 2)
    return mean, std[:, None] * std[None, :] * corr


def demo_truth(
    scenario: DemoScenario | None = None,
    *,
    small: bool = False,
    sections: dict[str, xr.Dataset] | None = None,
) -> DemoTruth:
    """The true reference velocities and budgets of the demo box.

    Parameters
    ----------
    scenario : DemoScenario, optional
        Parameters (default: ``DemoScenario()``, or ``DemoScenario.small()``).
    small : bool
        Use the small fast scenario when ``scenario`` is not given.
    sections : dict of str -> xr.Dataset, optional
        Canonical sections already generated for this scenario.

    Returns
    -------
    DemoTruth
        ``b_true`` per pair relative to ``demo.toml``'s reference, with which
        every class mass budget of the box closes with the diapycnal transfers,
        the Ekman transports and the strait, and the inflow line carries
        ``inflow_net``.
    """
    scenario = _pick(scenario, small)
    scenario.check()
    if sections is None:
        sections = {line.name: generate_section(line.name, scenario) for line in scenario.lines}
    # the truth is conditioned on the same constraint rows the inverse of demo.toml
    # assembles (one budget state), with the transfers at their true values and exact
    # class mass budgets: demo.toml's configuration, mass only, every transfer an unknown
    config = demo_config(scenario, {line.name: f"{line.name}_line.nc" for line in scenario.lines})
    config.inverse.conserve = ["mass"]
    config.inverse.prior_diapycnal = 1.0
    inflow = scenario.lines[0]
    config.inverse.section_net = ([] if scenario.inflow_net is None
                                  else [SectionNet(inflow.name, scenario.inflow_net, 1.0)])
    study = Study.from_config(config, sections=sections)
    state = BudgetState.prepare(study)
    ops = study.operators
    system, layout = state.system, state.layout
    rows = np.array([c != constraint_label("mass") for _, c in system.rows])
    pairs = np.concatenate([np.arange(layout.pair_slices[line.name].start,
                                      layout.pair_slices[line.name].stop)
                            for line in scenario.lines])
    box = config.effective_boxes()[0]
    transfers = [layout.diapycnal[(box.name, n)] for n in range(len(scenario.diapycnal))]
    a = system.matrix[np.ix_(rows, pairs)]  # Sv per m s^-1
    y = -(system.initial[rows]
          + system.matrix[np.ix_(rows, transfers)] @ np.asarray(scenario.diapycnal, float))

    means, covs = [], []
    for line in scenario.lines:
        mean, cov = _prior(scenario, line, ops[line.name])
        means.append(mean)
        covs.append(cov)
    sizes = [ops[line.name].n_pair for line in scenario.lines]
    n = sum(sizes)
    mean = np.concatenate(means)
    cov = np.zeros((n, n))
    start = 0
    for size, c in zip(sizes, covs, strict=True):
        cov[start : start + size, start : start + size] = c
        start += size
    chol = np.linalg.cholesky(cov + 1e-12 * np.eye(n) * np.trace(cov) / n)
    b_draw = mean + chol @ _rng(scenario, 4).standard_normal(n)
    gain = cov @ a.T
    b_all = b_draw + gain @ np.linalg.solve(a @ gain, y - a @ b_draw)

    upper = scenario.layer_names.index(scenario.strait_layer)
    strait_sa = float(
        np.mean([ops[line.name].class_salinity[upper] for line in scenario.lines])
    )
    split = np.cumsum(sizes)[:-1]
    b_true = dict(zip([line.name for line in scenario.lines], np.split(b_all, split), strict=True))
    draws = dict(zip([line.name for line in scenario.lines], np.split(b_draw, split), strict=True))
    truth = DemoTruth(
        scenario=scenario,
        sections=sections,
        operators=dict(ops),
        ref_pressure={name: ref.pressure for name, ref in state.references.items()},
        offset=state.offsets,
        b_draw=draws,
        b_true=b_true,
        ekman=dict(state.ekman),
        diapycnal=np.asarray(scenario.diapycnal, dtype=float),
        known=scenario.known_by_class,
        strait_salinity=strait_sa,
        box=box,
    )
    scale = np.abs(a).sum(axis=1) * np.abs(b_all).max() + np.abs(y)
    if np.any(np.abs(a @ b_all - y) > 1e-9 * np.maximum(scale, 1.0)):
        raise ComputationError("the demo truth's constraints could not be met to round-off")
    return truth
