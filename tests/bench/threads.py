"""One run on 1 and 2 threads, tabcard against PyTorch: `bench train --threads N` (the run on a
pool of N threads, as one run of `train --jobs N` computes) and `torch_reference.py train
--threads N` (torch.set_num_threads(N); model, optimizer and a warm-up epoch outside its timer),
alternating, REPS times each; prints the medians (samples per second of the timed epochs) and
the ratios BENCHMARKS.md records.

Usage: python threads.py WORKDIR TORCH_PYTHON [REPS]   (run by tests/bench/threads.sh)
"""
import json
import os
import statistics
import subprocess
import sys

REPO = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
BENCH = os.path.join(REPO, "target", "release", "examples", "bench")
TORCH_SCRIPT = os.path.join(REPO, "tests", "bench", "torch_reference.py")
CASES = {
    "reference MLP 32-256-256-1, 100k rows": ["--hidden", "256,256"],
    "wide 32-1024-1024-1, 20k rows, 2 epochs": ["--hidden", "1024,1024", "--train-rows", "20000", "--epochs", "2"],
}


def samples_per_second(cmd):
    out = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])["samples_per_second"]


def main():
    work, torch_python = sys.argv[1], sys.argv[2]
    reps = int(sys.argv[3]) if len(sys.argv) > 3 else 3
    data = os.path.join(work, "synthetic-100k-x32.parquet")
    if not os.path.exists(data):
        subprocess.run([BENCH, "data", "100000", "32", data], check=True, capture_output=True)
    for name, args in CASES.items():
        runs = {}
        for _ in range(reps):
            for who, threads in [("tabcard", 1), ("tabcard", 2), ("PyTorch", 1), ("PyTorch", 2)]:
                cmd = [BENCH, "train", data] if who == "tabcard" else [torch_python, TORCH_SCRIPT, "train", data]
                runs.setdefault((who, threads), []).append(samples_per_second(cmd + args + ["--threads", str(threads)]))
        med = {k: statistics.median(v) for k, v in runs.items()}
        print(name)
        for (who, threads), v in runs.items():
            print(f"  {who} {threads} thread(s): median {med[(who, threads)]:,.0f} samples/s (each: {', '.join(f'{x:,.0f}' for x in v)})")
        print(f"  tabcard 2 threads / 1 thread {med[('tabcard', 2)] / med[('tabcard', 1)]:.2f}x; "
              f"tabcard 2 / PyTorch 2 {med[('tabcard', 2)] / med[('PyTorch', 2)]:.2f}x; "
              f"PyTorch 2 / 1 {med[('PyTorch', 2)] / med[('PyTorch', 1)]:.2f}x")


if __name__ == "__main__":
    main()
