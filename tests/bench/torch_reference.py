"""PyTorch CPU reference for tabcard's benchmark (tests/bench/run.sh): the same MLP, optimizer and
batches a practitioner would script by hand. Prints one JSON line per measurement.

What the timer includes, per seed: `--epochs` training epochs (shuffle with randperm, forward,
loss, backward, AdamW step, and one validation pass over the validation rows per epoch), after one
untimed warm-up epoch. Outside it, as a practitioner would judge a library: imports, loading the
data, building the model and the optimizer (a throwaway AdamW is built and stepped once before
any timing, so the ~900 modules the first AdamW imports never count), the warm-up epoch, and the
final pass over all rows. tabcard's side (bench.rs `train`) times the same span.

  python torch_reference.py train DATA.parquet --hidden 256,256 --batch 256 --epochs 3 [--dropout P] [--batch-norm]
                             [--threads 1] [--seeds 1] [--first-seed 1] [--cols K] [--train-rows N]
                             [--validation-rows 1000] [--regression]
  python torch_reference.py sgemm [--size 1024]   single-core float32 matrix-multiply peak (numpy and torch)
"""
import argparse
import json
import time

import numpy as np
import pyarrow.parquet as pq
import torch


def load(path, cols=None):
    table = pq.read_table(path)
    names = [n for n in table.column_names if n != "y"][:cols]
    x = np.column_stack([table.column(n).to_numpy().astype(np.float32) for n in names])
    y = table.column("y").to_numpy().astype(np.float32)
    return torch.from_numpy(np.ascontiguousarray(x)), torch.from_numpy(y).reshape(-1, 1)


def model(inputs, hidden, dropout, batch_norm):
    layers, width = [], inputs
    for w in hidden:
        layers.append(torch.nn.Linear(width, w))
        if batch_norm:
            layers.append(torch.nn.BatchNorm1d(w))
        layers.append(torch.nn.ReLU())
        if dropout > 0:
            layers.append(torch.nn.Dropout(dropout))
        width = w
    layers.append(torch.nn.Linear(width, 1))
    return torch.nn.Sequential(*layers)


def epoch(net, opt, loss_fn, x, y, vx, batch, batch_norm, g):
    net.train()
    order = torch.randperm(x.shape[0], generator=g)
    for start in range(0, x.shape[0], batch):
        idx = order[start:start + batch]
        if batch_norm and len(idx) < 2:
            continue
        opt.zero_grad(set_to_none=True)
        loss = loss_fn(net(x[idx]), y[idx])
        loss.backward()
        opt.step()
    net.eval()
    with torch.no_grad():
        net(vx)


def train_once(x, y, vx, hidden, dropout, batch_norm, batch, epochs, seed, regression):
    """Returns (parameters, seconds of the timed epochs)."""
    torch.manual_seed(seed)
    net = model(x.shape[1], hidden, dropout, batch_norm)
    # Weight decay on weights only, as tabcard does (common practice).
    decay = [p for n, p in net.named_parameters() if n.endswith("weight") and p.dim() == 2]
    rest = [p for n, p in net.named_parameters() if not (n.endswith("weight") and p.dim() == 2)]
    opt = torch.optim.AdamW([{"params": decay, "weight_decay": 1e-2}, {"params": rest, "weight_decay": 0.0}], lr=1e-3)
    loss_fn = torch.nn.MSELoss() if regression else torch.nn.BCEWithLogitsLoss()
    g = torch.Generator().manual_seed(seed)
    epoch(net, opt, loss_fn, x, y, vx, batch, batch_norm, g)  # warm-up, untimed
    started = time.perf_counter()
    for _ in range(epochs):
        epoch(net, opt, loss_fn, x, y, vx, batch, batch_norm, g)
    seconds = time.perf_counter() - started
    # As tabcard does at the end of a run: outputs for every training and validation row (untimed
    # on both sides).
    with torch.no_grad():
        for start in range(0, x.shape[0], 4096):
            net(x[start:start + 4096])
        net(vx)
    return sum(p.numel() for p in net.parameters()), seconds


def warm_up(inputs):
    """Builds and steps a throwaway model and AdamW, so imports and first-use costs stay untimed."""
    net = model(inputs, [8], 0.0, False)
    opt = torch.optim.AdamW(net.parameters(), lr=1e-3)
    loss = torch.nn.BCEWithLogitsLoss()(net(torch.zeros(2, inputs)), torch.zeros(2, 1))
    loss.backward()
    opt.step()


def cmd_train(a):
    torch.set_num_threads(a.threads)
    x, y = load(a.data, a.cols)
    vx = x[:a.validation_rows].clone()
    if a.train_rows:
        x, y = x[:a.train_rows].contiguous(), y[:a.train_rows].contiguous()
    hidden = [int(h) for h in a.hidden.split(",") if h]
    warm_up(x.shape[1])
    seconds = 0.0
    for seed in range(a.first_seed, a.first_seed + a.seeds):
        params, s = train_once(x, y, vx, hidden, a.dropout, a.batch_norm, a.batch, a.epochs, seed, a.regression)
        seconds += s
    samples = x.shape[0] * a.epochs * a.seeds
    steps = -(-x.shape[0] // a.batch) * a.epochs * a.seeds
    print(json.dumps({"library": f"torch {torch.__version__}", "threads": a.threads, "seconds": seconds,
                      "samples_per_second": samples / seconds, "steps_per_second": steps / seconds, "parameters": params}))


def cmd_sgemm(a):
    torch.set_num_threads(1)
    n = a.size
    rng = np.random.default_rng(0)
    x = rng.standard_normal((n, n), dtype=np.float32)
    w = rng.standard_normal((n, n), dtype=np.float32)
    best = {}
    tx, tw = torch.from_numpy(x), torch.from_numpy(w)
    for name, f in (("numpy", lambda: x @ w), ("torch", lambda: tx @ tw)):
        f()
        times = []
        for _ in range(20):
            t = time.perf_counter()
            f()
            times.append(time.perf_counter() - t)
        best[name] = 2 * n ** 3 / min(times) / 1e9
    print(json.dumps({"sgemm_gflops": max(best.values()), "by_library": best, "size": n}))


def main():
    p = argparse.ArgumentParser()
    sub = p.add_subparsers(dest="cmd", required=True)
    t = sub.add_parser("train")
    t.add_argument("data")
    t.add_argument("--hidden", default="256,256")
    t.add_argument("--batch", type=int, default=256)
    t.add_argument("--epochs", type=int, default=3)
    t.add_argument("--dropout", type=float, default=0.0)
    t.add_argument("--batch-norm", action="store_true")
    t.add_argument("--threads", type=int, default=1)
    t.add_argument("--seeds", type=int, default=1)
    t.add_argument("--first-seed", type=int, default=1)
    t.add_argument("--regression", action="store_true")
    t.add_argument("--cols", type=int, default=None)
    t.add_argument("--train-rows", type=int, default=0)
    t.add_argument("--validation-rows", type=int, default=1000)
    s = sub.add_parser("sgemm")
    s.add_argument("--size", type=int, default=1024)
    a = p.parse_args()
    {"train": cmd_train, "sgemm": cmd_sgemm}[a.cmd](a)


if __name__ == "__main__":
    main()
