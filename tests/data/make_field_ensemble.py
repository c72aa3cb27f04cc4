#!/usr/bin/env python3
"""Writes a small ensemble of 2-D Kolmogorov-flow runs as reference data for the dataset readers.

The flow: 2-D incompressible Navier-Stokes in vorticity form on the periodic square [0, 2pi)^2,
forced by the body force sin(n y) in x (Kolmogorov flow: Meshalkin & Sinai 1961; the 2-D
setting with n = 4, Re = 40 as in Chandler & Kerswell 2013, J. Fluid Mech. 722, 554-595):

    d(omega)/dt + u . grad(omega) = (1/Re) lap(omega) - n cos(n y)

solved pseudo-spectrally on an N x N grid (2/3-rule dealiasing) with the integrating-factor
fourth-order Runge-Kutta scheme (Trefethen 2000, Spectral Methods in MATLAB, program 27).
The grid here is far coarser than the 256^2 of the paper: the runs are a cheap, chaotic test
signal, not a converged simulation.

Each run starts from its own random large-scale vorticity field, is spun up for 20 time units
with time step 0.05, and is then saved every 0.25 time units. Measured on the default 32 x 32
grid: the autocorrelation of the vorticity anomaly (over the whole grid) falls to 0.34 at a lag
of 2 time units, and halving the time step leaves the runs completely decorrelated by the end of
the record (sensitive dependence on small differences), so the signal is chaotic, not periodic. The three
default runs take about 3 s with NumPy. Written into OUT_DIR:

  field_classic.nc   NETCDF3_CLASSIC        (netCDF4-python)
  field_64bit.nc     NETCDF3_64BIT_OFFSET   (netCDF4-python)
  field_cdf5.nc      NETCDF3_64BIT_DATA     (netCDF4-python)
  field_nc4.nc       NETCDF4 (HDF5)         (netCDF4-python)
  field_gap.nc       NETCDF3_CLASSIC with one _FillValue inside `omega` (a gap)
  field.npz          numpy.savez            (one archive per file, runs stacked on axis 1)
  field_compressed.npz numpy.savez_compressed
  run<k>.npz / run<k>_classic.nc   one file per run (the ensemble)
  checksums.json     what NumPy reads back from every file: per variable its shape, the sum,
                     the sum of squares and a few values, after CF unpacking (scale_factor,
                     add_offset)

Variables (dimensions time, run, y, x in the combined files; time, y, x per run):
  omega     float32 vorticity
  u, v      float64 velocity components
  omega_i16 int16 vorticity packed with scale_factor/add_offset and a _FillValue
  energy    float64 kinetic energy per snapshot (time, run)
  time      float64 coordinate, units "1" (time in units of the forcing scale)

Usage: make_field_ensemble.py OUT_DIR [--runs 3] [--snapshots 120] [--grid 32] [--seed 1]
"""
import argparse
import json
import os
import sys

import numpy as np


def simulate(runs, snapshots, grid, seed, re=40.0, n_force=4, dt=0.05, spin_up=20.0, interval=0.25):
    """Returns omega, u, v of shape (snapshots, runs, grid, grid) and the save times."""
    rng = np.random.default_rng(seed)
    k1 = np.fft.fftfreq(grid, 1.0 / grid)
    kx = np.fft.rfftfreq(grid, 1.0 / grid)
    KY, KX = np.meshgrid(k1, kx, indexing="ij")
    k2 = KX**2 + KY**2
    k2_inv = np.where(k2 == 0, 0.0, 1.0 / np.where(k2 == 0, 1.0, k2))
    kmax = grid // 3
    dealias = (np.abs(KX) <= kmax) & (np.abs(KY) <= kmax)
    y = 2 * np.pi * np.arange(grid) / grid
    forcing = -n_force * np.cos(n_force * y)[:, None] * np.ones((1, grid))
    f_hat = np.fft.rfft2(forcing)
    lin = -k2 / re
    e_half = np.exp(lin * dt / 2)
    e_full = e_half**2

    def velocity(w_hat):
        psi = w_hat * k2_inv
        u = np.fft.irfft2(1j * KY * psi, s=(grid, grid))
        v = np.fft.irfft2(-1j * KX * psi, s=(grid, grid))
        return u, v

    def rhs(w_hat):
        u, v = velocity(w_hat)
        w = np.fft.irfft2(w_hat, s=(grid, grid))
        adv = 1j * KX * np.fft.rfft2(u * w) + 1j * KY * np.fft.rfft2(v * w)
        return -adv * dealias + f_hat

    # Random large-scale initial vorticity, one field per run.
    w0 = rng.standard_normal((runs, grid, grid))
    w_hat = np.fft.rfft2(w0) * (k2 <= 16) * (k2 > 0)
    w_hat *= 2.0 * grid * grid / np.sqrt(np.sum(np.abs(w_hat) ** 2, axis=(1, 2), keepdims=True))

    def step(w_hat):
        a = dt * rhs(w_hat)
        b = dt * rhs(e_half * (w_hat + a / 2))
        c = dt * rhs(e_half * w_hat + b / 2)
        d = dt * rhs(e_full * w_hat + e_half * c)
        return e_full * w_hat + (e_full * a + 2 * e_half * (b + c) + d) / 6

    for _ in range(int(round(spin_up / dt))):
        w_hat = step(w_hat)
    per_save = int(round(interval / dt))
    omega = np.empty((snapshots, runs, grid, grid))
    u = np.empty_like(omega)
    v = np.empty_like(omega)
    for s in range(snapshots):
        omega[s] = np.fft.irfft2(w_hat, s=(grid, grid))
        u[s], v[s] = velocity(w_hat)
        for _ in range(per_save):
            w_hat = step(w_hat)
    times = spin_up + interval * np.arange(snapshots)
    return omega, u, v, times


OMEGA_SCALE = 1.0e-3
OMEGA_OFFSET = 0.5
I16_FILL = -32768


def pack_i16(omega):
    packed = np.round((omega - OMEGA_OFFSET) / OMEGA_SCALE)
    if np.abs(packed).max() >= 32767:
        sys.exit("omega does not fit the int16 packing; change OMEGA_SCALE")
    return packed.astype(np.int16)


def write_netcdf(path, fmt, omega, u, v, times, per_run=False, gap=False):
    import netCDF4

    ds = netCDF4.Dataset(path, "w", format=fmt)
    ds.title = "2-D Kolmogorov flow, reference data for closure-budget"
    ds.Conventions = "CF-1.8"
    grid = omega.shape[-1]
    ds.createDimension("time", None)
    if not per_run:
        ds.createDimension("run", omega.shape[1])
    ds.createDimension("y", grid)
    ds.createDimension("x", grid)
    dims = ("time", "y", "x") if per_run else ("time", "run", "y", "x")
    t = ds.createVariable("time", "f8", ("time",))
    t.units = "1"
    t.long_name = "time in units of the forcing length over the forcing velocity"
    t.standard_name = "time"
    xv = ds.createVariable("x", "f8", ("x",))
    xv.units = "1"
    yv = ds.createVariable("y", "f8", ("y",))
    yv.units = "1"
    w = ds.createVariable("omega", "f4", dims, fill_value=np.float32(9.96921e36) if gap else None)
    w.units = "1"
    w.long_name = "vorticity"
    w.standard_name = "atmosphere_relative_vorticity"
    uu = ds.createVariable("u", "f8", dims)
    uu.units = "1"
    uu.long_name = "velocity along x"
    vv = ds.createVariable("v", "f8", dims)
    vv.units = "1"
    vv.long_name = "velocity along y"
    p = ds.createVariable("omega_i16", "i2", dims, fill_value=np.int16(I16_FILL))
    p.scale_factor = np.float64(OMEGA_SCALE)
    p.add_offset = np.float64(OMEGA_OFFSET)
    p.long_name = "vorticity packed as int16"
    p.units = "1"
    e = ds.createVariable("energy", "f8", dims[:-2])
    e.long_name = "kinetic energy per unit area"
    e.units = "1"
    p.set_auto_maskandscale(False)
    xv[:] = 2 * np.pi * np.arange(grid) / grid
    yv[:] = 2 * np.pi * np.arange(grid) / grid
    t[:] = times
    w[:] = omega.astype(np.float32)
    uu[:] = u
    vv[:] = v
    p[:] = pack_i16(omega)
    e[:] = 0.5 * np.mean(u**2 + v**2, axis=(-2, -1))
    if gap:
        w.set_auto_mask(False)
        w[3, 0, 5, 7] = np.float32(9.96921e36)
    ds.close()


def checksums_of_netcdf(path):
    """What netCDF4-python reads back (masked and scaled), per variable."""
    import netCDF4

    ds = netCDF4.Dataset(path)
    out = {}
    for name, var in ds.variables.items():
        a = np.ma.filled(var[:].astype(np.float64), np.nan)
        out[name] = describe(a)
        out[name]["dimensions"] = list(var.dimensions)
        out[name]["units"] = getattr(var, "units", None)
    out["_format"] = ds.data_model
    ds.close()
    return out


def checksums_of_npz(path):
    out = {}
    with np.load(path) as z:
        for name in z.files:
            a = z[name]
            d = describe(a.astype(np.float64))
            d["dtype"] = a.dtype.str
            out[name] = d
    return out


def describe(a):
    flat = a.reshape(-1)
    return {
        "shape": list(a.shape),
        "sum": float(np.sum(a)),
        "sum_sq": float(np.sum(a * a)),
        "first": [float(x) for x in flat[:4]],
        "last": float(flat[-1]),
    }


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out_dir")
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--snapshots", type=int, default=120)
    ap.add_argument("--grid", type=int, default=32)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--no-netcdf", action="store_true", help="write only the .npz files")
    args = ap.parse_args()
    os.makedirs(args.out_dir, exist_ok=True)
    omega, u, v, times = simulate(args.runs, args.snapshots, args.grid, args.seed)
    sums = {"grid": args.grid, "runs": args.runs, "snapshots": args.snapshots,
            "sample_interval": float(times[1] - times[0]), "files": {}}
    j = lambda name: os.path.join(args.out_dir, name)
    energy = 0.5 * np.mean(u**2 + v**2, axis=(-2, -1))
    arrays = dict(omega=omega.astype(np.float32), u=u, v=v, omega_i16=pack_i16(omega),
                  energy=energy, time=times)
    np.savez(j("field.npz"), **arrays)
    np.savez_compressed(j("field_compressed.npz"), **arrays)
    for name in ["field.npz", "field_compressed.npz"]:
        sums["files"][name] = checksums_of_npz(j(name))
    for r in range(args.runs):
        name = f"run{r}.npz"
        np.savez(j(name), omega=omega[:, r].astype(np.float32), u=u[:, r], v=v[:, r], time=times)
        sums["files"][name] = checksums_of_npz(j(name))
    if not args.no_netcdf:
        formats = {"field_classic.nc": "NETCDF3_CLASSIC", "field_64bit.nc": "NETCDF3_64BIT_OFFSET",
                   "field_cdf5.nc": "NETCDF3_64BIT_DATA", "field_nc4.nc": "NETCDF4"}
        for name, fmt in formats.items():
            write_netcdf(j(name), fmt, omega, u, v, times)
            sums["files"][name] = checksums_of_netcdf(j(name))
        write_netcdf(j("field_gap.nc"), "NETCDF3_CLASSIC", omega, u, v, times, gap=True)
        for r in range(args.runs):
            name = f"run{r}_classic.nc"
            write_netcdf(j(name), "NETCDF3_CLASSIC", omega[:, r:r + 1], u[:, r:r + 1],
                         v[:, r:r + 1], times)
            sums["files"][name] = checksums_of_netcdf(j(name))
    with open(j("checksums.json"), "w") as f:
        json.dump(sums, f, indent=1, sort_keys=True)


if __name__ == "__main__":
    main()
