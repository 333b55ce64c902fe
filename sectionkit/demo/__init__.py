"""The demo's own invented ocean: two hydrographic lines closing a box, with a known truth.

The scenario is made up from start to finish. The *Orinel Basin* is an
invented mid-latitude basin of the northern hemisphere, closed to the west and
east by continental margins and split by the *Ambrel Ridge*. The invented
research vessel *Quillmark* occupied two lines across it on cruise QM-07:

- ``south``, near 28 degrees N, under trade-wind easterlies;
- ``north``, near 41 degrees N, under westerlies.

Between the lines the only other opening is the *Sennet Strait* on the eastern
margin, through which a small known transport of upper water enters the box.

How the ocean is built
----------------------
1. **Topography**: shelves and continental slopes at both ends, abyssal plains
   near 5000-5500 m and the mid-basin ridge rising to about 2700 m, with small
   seeded abyssal hills. Stations crowd over the slopes (10-20 km) and spread
   out in the interior.
2. **Water masses** in TEOS-10 variables: a reference profile of Conservative
   Temperature and Absolute Salinity versus a *reference pressure* zeta (a warm
   salty thermocline, a fresher intermediate water near 1000 dbar, deep water
   of 2-4 degC, the densest bottom water below about 4300 dbar).
3. **Isopycnal tilts**: every station's profile is that reference profile
   read at a displaced coordinate ``zeta(p) = p + sum_m D_m(x) g_m(p)`` with
   smooth vertical modes ``g_m`` and along-line amplitudes ``D_m``: the
   thermocline rises sharply inshore of a narrow poleward western boundary jet
   and shoals gently eastward across the interior (broad equatorward return
   flow by thermal wind), deep isopycnals dome against the western slope (a
   southward-intensifying deep boundary current), and the northern line is
   lifted as a whole (colder, shallower thermocline). Because ``zeta`` is
   monotonic in ``p`` the columns stay stably stratified. The geostrophic
   shear the engine computes therefore *follows* from the density field.
4. **Observations**: in-situ temperature (ITS-90) and practical salinity from
   gsw, with small seeded measurement noise (a bounded Gaussian), rounded to
   float32 as written to the files. The canonical Dataset is rebuilt from those
   stored values exactly as a reader would (gsw.SA_from_SP at each station's
   position, gsw.CT_from_t), so the truth below refers to the data users load.
5. **Truth**: with the reference of ``demo.toml`` (a level of no motion that
   is plausible but wrong), per-pair true reference velocities ``b_true`` are a
   draw from a Gaussian prior (a southward deep western boundary current in
   the mean, smooth eddy-like departures), conditioned so that exactly

   - every class mass budget of the box closes given the diapycnal transfers
     ``W``, the Ekman transports of the configured wind stresses and the
     strait, and
   - the net transport across the inflow line has the chosen value (zero).

   The rows ``A b = y`` are those the inverse of ``demo.toml`` assembles
   (:class:`sectionkit.state.BudgetState`, mass only, transfers at their true
   values), and the conditioning is the minimum-norm correction in the
   prior's metric, ``b = b_draw + P A^T (A P A^T)^-1 (y - A b_draw)``. Salt is not forced:
   the truth's salt imbalances are reported with it (forcing the box's salt
   budget as well would take reference velocities of tens of cm/s, because
   salt rows are nearly parallel to mass rows).

Everything is deterministic: a fixed seed, generators derived from it per
purpose, no timestamps in the files; two generations are byte-identical.

Modules: :mod:`~sectionkit.demo.scenario` (the basin, lines, cruise and
``demo.toml``), :mod:`~sectionkit.demo.ocean` (topography, water masses,
observed casts), :mod:`~sectionkit.demo.truth` (the known answer),
:mod:`~sectionkit.demo.files` (NetCDF sections, truth tables, the bundled copy)
and :mod:`~sectionkit.demo.exchange` (one line as exchange files).

Regenerate the bundled files with ``python -m sectionkit.demo --write demo_sections``.
"""

from sectionkit.demo.files import BUNDLED_DIR, bundled_demo_config, main, write_demo
from sectionkit.demo.ocean import (
    REFERENCE_PROFILE,
    bottom_depth_profile,
    generate_section,
    reference_water,
    station_distances,
    true_water,
)
from sectionkit.demo.scenario import DemoScenario, LineSpec
from sectionkit.demo.truth import DemoTruth, build_demo_operators, demo_truth

__all__ = [
    "DemoScenario",
    "DemoTruth",
    "LineSpec",
    "BUNDLED_DIR",
    "bundled_demo_config",
    "REFERENCE_PROFILE",
    "bottom_depth_profile",
    "build_demo_operators",
    "demo_truth",
    "generate_section",
    "main",
    "reference_water",
    "station_distances",
    "true_water",
    "write_demo",
]
