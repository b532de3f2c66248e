"""One PINN training step in PyTorch CPU, the same networks, loss and batch as
slowfield's (experiments/pinn_bench/main.rs). Prints eight numbers, wall and CPU ms/step
(process CPU time, all threads) for: autograd(create_graph) with 1 and 2 threads,
tangent form with 1 and 2 threads.

Usage: python3 torch_step.py N
"""
import sys
import time

import torch

torch.manual_seed(0)
L, DEPTH, V0, G = 100.0, 25.0, 500.0, 20.0  # line length, depth, start model v_top + G*depth
VMIN, VMAX = 100.0, 5000.0
XC, HX, ZC, HZ, HD = 50.0, 50.0, -12.5, 12.5, 12.5
M = 900  # picks per step (15 shots x 60 receivers)


def mlp(d_in, width, depth):
    layers, d = [], d_in
    for _ in range(depth):
        layers += [torch.nn.Linear(d, width), torch.nn.Tanh()]
        d = width
    layers.append(torch.nn.Linear(d, 1))
    return torch.nn.Sequential(*layers)


def start_slowness(p):
    return 1.0 / (V0 + G * (-p[:, 1:2]))


def start_logit(p):
    q = (V0 + G * (-p[:, 1:2]) - VMIN) / (VMAX - VMIN)
    return torch.log(q / (1 - q))


def features(a, b):
    kx, kz = 0.5 / HX, 0.5 / HZ
    mx = (0.5 * (a[:, 0:1] + b[:, 0:1]) - XC) / HX
    mz = (0.5 * (a[:, 1:2] + b[:, 1:2]) - ZC) / HZ
    ex = (a[:, 0:1] - b[:, 0:1]) * kx
    ez = (a[:, 1:2] - b[:, 1:2]) * kz
    rho = torch.sqrt(ex * ex + ez * ez)
    return torch.cat([mx, mz, ex * ex, ez * ez, ex * ez, rho], 1)


def factor(a, b):
    r = torch.sqrt(((a - b) ** 2).sum(1, keepdim=True))
    return r * 0.5 * (start_slowness(a) + start_slowness(b))


def sample(n):
    a = torch.rand(n, 2) * torch.tensor([L, -DEPTH])
    b = torch.cat([torch.rand(n, 1) * L, torch.zeros(n, 1)], 1)
    return a, b


def picks():
    pb = torch.cat([torch.rand(M, 1) * L, torch.zeros(M, 1)], 1)
    pa = torch.cat([torch.rand(M, 1) * L, torch.zeros(M, 1)], 1)
    t = factor(pa, pb) * 0.9
    return features(pa, pb), factor(pa, pb), t


def step_autograd(tau, vel, opt, n, pk):
    fp, t0p, tobs = pk
    a, b = sample(n)
    a.requires_grad_(True)
    T = factor(a, b) * (1 + tau(features(a, b)))
    (gT,) = torch.autograd.grad(T.sum(), a, create_graph=True)
    vin = torch.cat([(a[:, 0:1] - XC) / HX, (a[:, 1:2] - ZC) / HZ], 1)
    v = VMIN + (VMAX - VMIN) * torch.sigmoid(vel(vin) + start_logit(a))
    (gv,) = torch.autograd.grad(v.sum(), a, create_graph=True)
    res = v * torch.sqrt((gT * gT).sum(1, keepdim=True)) - 1
    reg = ((gv * HD / (VMAX - VMIN)) ** 2).sum(1).mean()
    tp = t0p * (1 + tau(fp))
    data = (((tp - tobs) / 1e-3) ** 2).mean()
    loss = data + 1000 * (res * res).mean() + 1e-3 * reg
    opt.zero_grad()
    loss.backward()
    opt.step()


def tangent_forward(net, x, dxs):
    """Value and input tangents through Linear/Tanh layers as ordinary tensor ops."""
    h, ds = x, dxs
    mods = list(net)
    for k, m in enumerate(mods):
        if isinstance(m, torch.nn.Linear):
            h = m(h)
            ds = [d @ m.weight.t() for d in ds]
        else:
            h = torch.tanh(h)
            s = 1 - h * h
            ds = [d * s for d in ds]
    return h, ds


def step_tangent(tau, vel, opt, n, pk):
    fp, t0p, tobs = pk
    a, b = sample(n)
    # constant inputs and their x/z derivatives (slowfield computes them on the host)
    f = features(a, b)
    kx, kz = 0.5 / HX, 0.5 / HZ
    ex = (a[:, 0:1] - b[:, 0:1]) * kx
    ez = (a[:, 1:2] - b[:, 1:2]) * kz
    rho = torch.sqrt(ex * ex + ez * ez)
    z = torch.zeros_like(ex)
    dfx = torch.cat([z + kx, z, 2 * ex * kx, z, ez * kx, ex / rho * kx], 1)
    dfz = torch.cat([z, z + kz, z, 2 * ez * kz, ex * kz, ez / rho * kz], 1)
    t0 = factor(a, b)
    r = torch.sqrt(((a - b) ** 2).sum(1, keepdim=True))
    sm = 0.5 * (start_slowness(a) + start_slowness(b))
    g0x = (a[:, 0:1] - b[:, 0:1]) / r * sm
    g0z = (a[:, 1:2] - b[:, 1:2]) / r * sm
    nv, (nx, nz) = tangent_forward(tau, f, [dfx, dfz])
    gtx = g0x * (1 + nv) + t0 * nx
    gtz = g0z * (1 + nv) + t0 * nz
    vin = torch.cat([(a[:, 0:1] - XC) / HX, (a[:, 1:2] - ZC) / HZ], 1)
    one = torch.ones(n, 1)
    zero = torch.zeros(n, 1)
    o, (ox, oz) = tangent_forward(vel, vin, [torch.cat([one / HX, zero], 1), torch.cat([zero, one / HZ], 1)])
    sg = torch.sigmoid(o + start_logit(a))
    v = VMIN + (VMAX - VMIN) * sg
    k = sg * (1 - sg) * HD
    res = v * torch.sqrt(gtx * gtx + gtz * gtz) - 1
    reg = ((k * ox) ** 2 + (k * oz) ** 2).mean()
    tp = t0p * (1 + tau(fp))
    data = (((tp - tobs) / 1e-3) ** 2).mean()
    loss = data + 1000 * (res * res).mean() + 1e-3 * reg
    opt.zero_grad()
    loss.backward()
    opt.step()


def bench(step, n, threads):
    torch.set_num_threads(threads)
    tau, vel = mlp(6, 64, 4), mlp(2, 32, 3)
    opt = torch.optim.Adam(list(tau.parameters()) + list(vel.parameters()), lr=2e-3)
    pk = picks()
    reps = 10 if n >= 16384 else 30
    for _ in range(3):
        step(tau, vel, opt, n, pk)
    t, c = time.perf_counter(), time.process_time()
    for _ in range(reps):
        step(tau, vel, opt, n, pk)
    return 1e3 * (time.perf_counter() - t) / reps, 1e3 * (time.process_time() - c) / reps


if __name__ == "__main__":
    n = int(sys.argv[1])
    out = [bench(step_autograd, n, 1), bench(step_autograd, n, 2), bench(step_tangent, n, 1), bench(step_tangent, n, 2)]
    print(" ".join(f"{w:.3f} {c:.3f}" for w, c in out))
