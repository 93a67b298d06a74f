"""The file layout of a run: every stored dataset's long name, units and named dimensions."""

import numpy as np

from assimbench.io.result_writer import Layout
from assimbench.twin.cycling import TwinSetup
from assimbench.twin.diagnostics import series_catalogue

FIELD_LAYOUTS = {
    "truth": Layout("true state", "state units", ("replicate", "cycle", "variable")),
    "observations": Layout("observations y", "observation units", ("replicate", "cycle", "station")),
    "forecast_mean": Layout("forecast ensemble mean", "state units", ("replicate", "cycle", "variable")),
    "analysis_mean": Layout("analysis ensemble mean", "state units", ("replicate", "cycle", "variable")),
    "analysis_ensemble": Layout("analysis ensemble", "state units", ("replicate", "snapshot", "member", "variable")),
}


def layouts_of(setup: TwinSetup) -> tuple:
    """(layouts, coordinates) of every dataset this setup stores."""
    members = setup.filter.members
    layouts = {}
    for name, series in series_catalogue(setup.diagnostics, members, setup.smoother_lag, setup.operator.outages,
                                         bool(setup.estimated)).items():
        if series.extra_dim is None:
            layouts[name] = Layout(series.long_name, series.units, ("replicate", "cycle"))
        else:  # rank counts are integers; lags, parameters and per-station sums are not
            kind = np.int32 if series.extra_dim == "rank" else np.float64
            layouts[name] = Layout(series.long_name, series.units, ("replicate", "cycle", series.extra_dim), kind)
    layouts.update({name: FIELD_LAYOUTS[name] for name in setup.fields})
    coordinates = {
        "variable": np.arange(setup.model.resolved_size),
        "station": setup.operator.positions,
        "member": np.arange(members),
        "rank": np.arange(members + 1),
        "lag": np.arange(1, setup.smoother_lag + 1),
        # Names as bytes: HDF5 and netCDF readers take fixed-length byte strings.
        "parameter": np.array(setup.estimated, dtype="S"),
    }
    used = {d for layout in layouts.values() for d in layout.dims[2:]}
    return layouts, {d: v for d, v in coordinates.items() if d in used}
