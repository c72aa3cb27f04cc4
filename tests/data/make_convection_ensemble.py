#!/usr/bin/env python3
"""Writes a small ensemble of 2-D forced-convection runs as NetCDF files, one per run.

The flow: Rayleigh-Benard convection in a 2-D layer heated from below, truncated to the three
Galerkin modes of Saltzman (1962) that give the Lorenz (1963) equations

    dX/dt = s (Y - X),   dY/dt = r X - Y - X Z,   dZ/dt = X Y - b Z     (s = 10, r = 28, b = 8/3)

with the stream function and temperature deviation on the (x, z) plane (mode shapes from
Lorenz 1963, J. Atmos. Sci. 20, 130-141, section 7; from memory, up to constant factors):

    psi(x, z, t)   = X(t) sin(pi a x) sin(pi z) + 0.05 X(t) Z(t) / 28 sin(2 pi a x) sin(pi z)
    theta(x, z, t) = Y(t) cos(pi a x) sin(pi z) - Z(t) sin(2 pi z)

on 0 <= x < 2/a, 0 <= z <= 1 with a = 1/sqrt(2). The weak second term of psi is not part of the
truncated model: it gives the fields a little energy outside the leading POD modes, so that a
truncation has a visible cost. Integrated with classical fourth-order Runge-Kutta, step 0.005;
each run starts from (1, 1, 20) plus a seeded perturbation, is spun up for 10 time units and is
then saved every 0.05 time units. A demo signal for the study engine, not a convection
simulation.

Writes OUT_DIR/conv<k>.nc (NETCDF3_CLASSIC, netCDF4-python): dimensions time (unlimited), z, x;
variables time(time), psi(time, z, x), theta(time, z, x), with CF units and long names.

Usage: make_convection_ensemble.py OUT_DIR [--runs 4] [--snapshots 600] [--nx 32] [--nz 16]
       [--seed 5]
"""
import argparse
import os

import numpy as np


def lorenz(s, r=28.0, sigma=10.0, b=8.0 / 3.0):
    x, y, z = s
    return np.array([sigma * (y - x), r * x - y - x * z, x * y - b * z])


def run(seed, snapshots, dt=0.005, interval=0.05, spin_up=10.0):
    rng = np.random.default_rng(seed)
    s = np.array([1.0, 1.0, 20.0]) + rng.normal(scale=1.0, size=3)
    every = int(round(interval / dt))
    out = np.empty((snapshots, 3))
    step = 0
    total = int(round(spin_up / dt)) + snapshots * every
    k = 0
    while k < snapshots:
        k1 = lorenz(s)
        k2 = lorenz(s + 0.5 * dt * k1)
        k3 = lorenz(s + 0.5 * dt * k2)
        k4 = lorenz(s + dt * k3)
        s = s + dt / 6.0 * (k1 + 2 * k2 + 2 * k3 + k4)
        step += 1
        if step * dt > spin_up - 1e-12 and (step - int(round(spin_up / dt))) % every == 0:
            out[k] = s
            k += 1
    assert step <= total
    return out


def fields(state, nx, nz):
    a = 1.0 / np.sqrt(2.0)
    x = np.arange(nx) * (2.0 / a) / nx
    z = (np.arange(nz) + 0.5) / nz
    Z, X = np.meshgrid(z, x, indexing="ij")
    s1 = np.sin(np.pi * a * X) * np.sin(np.pi * Z)
    s2 = np.sin(2 * np.pi * a * X) * np.sin(np.pi * Z)
    c1 = np.cos(np.pi * a * X) * np.sin(np.pi * Z)
    z2 = np.sin(2 * np.pi * Z)
    xs, ys, zs = state[:, 0, None, None], state[:, 1, None, None], state[:, 2, None, None]
    psi = xs * s1 + 0.05 * xs * zs / 28.0 * s2
    theta = ys * c1 - zs * z2
    return x, z, psi, theta


def write(path, times, x, z, psi, theta):
    import netCDF4

    ds = netCDF4.Dataset(path, "w", format="NETCDF3_CLASSIC")
    ds.title = "2-D convection in the three-mode truncation, demo data for closure-budget"
    ds.Conventions = "CF-1.8"
    ds.createDimension("time", None)
    ds.createDimension("z", len(z))
    ds.createDimension("x", len(x))
    t = ds.createVariable("time", "f8", ("time",))
    t.units = "1"
    t.long_name = "time in units of the thermal diffusion time over pi^2 (1 + a^2)"
    xv = ds.createVariable("x", "f8", ("x",))
    xv.units = "1"
    zv = ds.createVariable("z", "f8", ("z",))
    zv.units = "1"
    p = ds.createVariable("psi", "f8", ("time", "z", "x"))
    p.units = "1"
    p.long_name = "stream function"
    th = ds.createVariable("theta", "f8", ("time", "z", "x"))
    th.units = "K"
    th.long_name = "temperature deviation from the conductive profile"
    t[:] = times
    xv[:] = x
    zv[:] = z
    p[:] = psi
    th[:] = theta
    ds.close()


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out_dir")
    ap.add_argument("--runs", type=int, default=4)
    ap.add_argument("--snapshots", type=int, default=600)
    ap.add_argument("--nx", type=int, default=32)
    ap.add_argument("--nz", type=int, default=16)
    ap.add_argument("--seed", type=int, default=5)
    args = ap.parse_args()
    os.makedirs(args.out_dir, exist_ok=True)
    for k in range(args.runs):
        state = run(args.seed * 1000 + k, args.snapshots)
        x, z, psi, theta = fields(state, args.nx, args.nz)
        times = 0.05 * np.arange(args.snapshots)
        write(os.path.join(args.out_dir, f"conv{k}.nc"), times, x, z, psi, theta)


if __name__ == "__main__":
    main()
