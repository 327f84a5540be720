"""PyTorch CPU reference for tabcard's benchmark (tests/bench/run.sh): the same MLP, optimizer and
batches a practitioner would script by hand, timed the same way (training loop plus one validation
pass per epoch). Prints one JSON line per measurement.

  python torch_reference.py train DATA.parquet --hidden 256,256 --batch 256 --epochs 3 [--dropout P] [--batch-norm]
                             [--threads 1] [--seeds 1] [--cols K] [--train-rows N] [--validation-rows 1000]
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


def train_once(x, y, vx, hidden, dropout, batch_norm, batch, epochs, seed):
    torch.manual_seed(seed)
    net = model(x.shape[1], hidden, dropout, batch_norm)
    # Weight decay on weights only, as tabcard does (common practice).
    decay = [p for n, p in net.named_parameters() if n.endswith("weight") and p.dim() == 2]
    rest = [p for n, p in net.named_parameters() if not (n.endswith("weight") and p.dim() == 2)]
    opt = torch.optim.AdamW([{"params": decay, "weight_decay": 1e-2}, {"params": rest, "weight_decay": 0.0}], lr=1e-3)
    loss_fn = torch.nn.BCEWithLogitsLoss()
    g = torch.Generator().manual_seed(seed)
    n = x.shape[0]
    for _ in range(epochs):
        net.train()
        order = torch.randperm(n, generator=g)
        for start in range(0, n, batch):
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
    # As tabcard does at the end of a run: outputs for every training and validation row.
    with torch.no_grad():
        for start in range(0, n, 4096):
            net(x[start:start + 4096])
        net(vx)
    return sum(p.numel() for p in net.parameters())


def cmd_train(a):
    torch.set_num_threads(a.threads)
    x, y = load(a.data, a.cols)
    vx = x[:a.validation_rows].clone()
    if a.train_rows:
        x, y = x[:a.train_rows].contiguous(), y[:a.train_rows].contiguous()
    hidden = [int(h) for h in a.hidden.split(",") if h]
    started = time.perf_counter()
    for seed in range(1, a.seeds + 1):
        params = train_once(x, y, vx, hidden, a.dropout, a.batch_norm, a.batch, a.epochs, seed)
    seconds = time.perf_counter() - started
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
    t.add_argument("--cols", type=int, default=None)
    t.add_argument("--train-rows", type=int, default=0)
    t.add_argument("--validation-rows", type=int, default=1000)
    s = sub.add_parser("sgemm")
    s.add_argument("--size", type=int, default=1024)
    a = p.parse_args()
    {"train": cmd_train, "sgemm": cmd_sgemm}[a.cmd](a)


if __name__ == "__main__":
    main()
