"""Lorenz-96 ensemble forecast: members leading, (N, n), against members trailing, (n, N).

    python benchmarks/forecast_layout.py [--cycles 1000] [--rounds 3]

One cycle is 5 RK4 steps (interval 0.05, dt 0.01). Both layouts compute the
same numbers (the script checks the first cycle to 1e-13; fused kernels may
round differently); the
trailing layout transposes in and out of every cycle, as the flow of a model
with an ``ensemble_tendency`` does. Prints microseconds per cycle, median
over interleaved rounds, and the ratio leading / trailing (above 1: trailing
is faster).
"""

import argparse
import statistics
import time

import jax
import jax.numpy as jnp

jax.config.update("jax_enable_x64", True)

from assimbench.integrators import make_flow  # noqa: E402
from assimbench.models.lorenz96 import lorenz96_tendency  # noqa: E402

CASES = ((40, 10), (40, 20), (40, 40), (400, 20), (2000, 20))  # (n, N)


def trailing_tendency(x, params):
    """The Lorenz-96 tendency with variables on the first axis, x: (n, N)."""
    n = x.shape[0]
    padded = jnp.concatenate([x[-2:], x, x[:2]], axis=0)
    return (padded[3 : 3 + n] - padded[:n]) * padded[1 : 1 + n] - x + params["forcing"]


def cycling(flow, transpose: bool, cycles: int):
    params = {"forcing": 8.0}

    def run(x):
        def body(state, _):
            return (flow(state.T, params).T if transpose else flow(state, params)), None

        return jax.lax.scan(body, x, None, length=cycles)[0]

    return jax.jit(run)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cycles", type=int, default=1000)
    parser.add_argument("--rounds", type=int, default=3)
    args = parser.parse_args()
    print(f"{'n':>5} {'N':>3}  {'leading us':>10} {'trailing us':>11} {'ratio':>6}")
    for n, members in CASES:
        x = 8.0 + jax.random.normal(jax.random.PRNGKey(0), (members, n))
        leading = cycling(make_flow(lorenz96_tendency, 0.01, 5), False, args.cycles)
        trailing = cycling(make_flow(trailing_tendency, 0.01, 5), True, args.cycles)
        one_lead, one_trail = cycling(make_flow(lorenz96_tendency, 0.01, 5), False, 1), cycling(
            make_flow(trailing_tendency, 0.01, 5), True, 1)
        if not bool(jnp.allclose(one_lead(x), one_trail(x), rtol=1e-13, atol=1e-13)):
            raise SystemExit(f"layouts differ at n={n}, N={members}")
        leading(x).block_until_ready()
        trailing(x).block_until_ready()
        times = {"leading": [], "trailing": []}
        for _ in range(args.rounds):
            for name, program in (("leading", leading), ("trailing", trailing)):
                tic = time.perf_counter()
                program(x).block_until_ready()
                times[name].append((time.perf_counter() - tic) / args.cycles * 1e6)
        lead, trail = statistics.median(times["leading"]), statistics.median(times["trailing"])
        print(f"{n:5d} {members:3d}  {lead:10.1f} {trail:11.1f} {lead / trail:6.2f}")


if __name__ == "__main__":
    main()
