"""The benchmark driver behind tests/bench/run.sh: runs each tabcard measurement and its reference
alternately, REPS times, and prints medians, ratios and the share of the machine's single-core
matrix-multiply peak. Every figure comes from this run; nothing is asserted.

Usage: python driver.py WORKDIR [--reps N] [--torch PYTHON] [--previous BENCH]
  PYTHON: an interpreter with torch; BENCH: the `bench` program of an earlier tabcard build
  (run.sh builds tabcard 0.2.0, the gemm-based engine), for the engine-against-engine case.
"""
import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
REPO = os.path.dirname(os.path.dirname(HERE))
BENCH = os.path.join(REPO, "target", "release", "examples", "bench")
TABCARD = os.path.join(REPO, "target", "release", "tabcard")
TORCH_SCRIPT = os.path.join(HERE, "torch_reference.py")


def run_json(cmd, env=None):
    out = subprocess.run(cmd, check=True, capture_output=True, text=True, env=env)
    return json.loads(out.stdout.strip().splitlines()[-1])


def timed(cmd, env=None):
    started = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True, env=env)
    return time.perf_counter() - started


def peak_rss_of(cmd):
    """Runs cmd under a fresh Python parent (so no earlier child counts) and returns
    (seconds, peak resident set of cmd in bytes)."""
    probe = ("import resource, subprocess, sys, time; t = time.perf_counter(); "
             "subprocess.run(sys.argv[1:], check=True, capture_output=True); "
             "print(time.perf_counter() - t, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")
    out = subprocess.run([sys.executable, "-c", probe] + cmd, check=True, capture_output=True, text=True).stdout.split()
    return float(out[0]), int(out[1]) * 1024


def median(values):
    return statistics.median(values)


def alternate(reps, first, second):
    """Runs first() and second() alternately reps times; returns both lists of results."""
    a, b = [], []
    for _ in range(reps):
        a.append(first())
        b.append(second())
    return a, b


def manifest(path, data, hidden, epochs, seeds, batch, validation, test):
    with open(path, "w") as f:
        f.write(f"""[experiment]
name = "bench"

[data]
path = "{data}"
target = "y"
task = "binary"

[split]
validation = {validation}
test = {test}

[model]
hidden = {hidden}

[training]
optimizer = "adamw"
learning_rate = 0.001
weight_decay = 0.01
epochs = {epochs}
batch_size = {batch}
schedule = "constant"

[training.early_stopping]
enabled = false

[selection]
baseline = false
bootstrap = 200

[sweep]
seeds = {seeds}
""")


def main():
    p = argparse.ArgumentParser()
    p.add_argument("workdir")
    p.add_argument("--reps", type=int, default=3)
    p.add_argument("--torch", default=None, help="python with torch installed; omit to skip PyTorch")
    p.add_argument("--previous", default=None, help="bench program of an earlier tabcard build; omit to skip")
    p.add_argument("--skip-10m", action="store_true", help="skip the 10,000,000-row whole-command case (a 2.9 GB file, minutes)")
    a = p.parse_args()
    w = a.workdir
    os.makedirs(w, exist_ok=True)
    torch_py = a.torch
    # One thread for every math library the reference may load (torch's own pool is set by
    # --threads; numpy's OpenBLAS would otherwise use every core, and the "single-core" peak read
    # twice what one core can do).
    single = dict(os.environ, CUDA_VISIBLE_DEVICES="", OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    lines = []

    def report(line):
        print(line, flush=True)
        lines.append(line)

    data32 = os.path.join(w, "synthetic-100k-x32.parquet")
    run_json([BENCH, "data", "100000", "32", data32])

    report(f"tabcard benchmark: median of {a.reps} alternating repetitions; ratio = tabcard / reference (higher is better for tabcard)")
    report(f"machine: {os.cpu_count()} logical CPUs; {cpu_model()}")


    report("\n1. single run, one core (100,000 rows x 32 features, AdamW lr 1e-3 wd 1e-2, 3 epochs unless noted)")
    report("   both timers: the timed epochs after one untimed warm-up epoch (shuffle, forward, loss, backward, AdamW step, one")
    report("   validation pass of 1,000 rows per epoch); imports, data loading, model and optimizer construction, the warm-up")
    report("   epoch and the final pass over all rows are outside both (tabcard: a 4-epoch run minus a 1-epoch run)")
    report(f"   {'case':<34} {'tabcard':>14} {'PyTorch 1 thr':>14} {'ratio':>7}")
    cases = [
        ("reference MLP 32-256-256-1", ["--hidden", "256,256"], ["--hidden", "256,256"], "samples_per_second", "samples/s"),
        ("  with dropout 0.1", ["--hidden", "256,256", "--dropout", "0.1"], ["--hidden", "256,256", "--dropout", "0.1"], "samples_per_second", "samples/s"),
        ("  with batch norm", ["--hidden", "256,256", "--bn"], ["--hidden", "256,256", "--batch-norm"], "samples_per_second", "samples/s"),
        ("tiny 8-16-1, batch 32, 1 epoch", ["--hidden", "16", "--batch", "32", "--epochs", "1", "--cols", "8"], ["--hidden", "16", "--batch", "32", "--epochs", "1", "--cols", "8"], "steps_per_second", "steps/s"),
        ("  reference MLP, batch 4096", ["--hidden", "256,256", "--batch", "4096"], ["--hidden", "256,256", "--batch", "4096"], "samples_per_second", "samples/s"),
        ("  regression head (MSE)", ["--hidden", "256,256", "--regression"], ["--hidden", "256,256", "--regression"], "samples_per_second", "samples/s"),
        ("wide 32-1024-1024-1, 20k rows, 2 ep", ["--hidden", "1024,1024", "--train-rows", "20000", "--epochs", "2"], ["--hidden", "1024,1024", "--train-rows", "20000", "--epochs", "2"], "samples_per_second", "samples/s"),
    ]
    reference = None
    for i, (label, ours, theirs, key, unit) in enumerate(cases):
        paired_peaks = []

        def mine():
            # The reference case measures the matmul peak right before each of its runs, so the
            # FLOP share compares figures taken under the same machine load.
            if i == 0 and torch_py:
                paired_peaks.append(run_json([torch_py, TORCH_SCRIPT, "sgemm"], env=single)["sgemm_gflops"])
            return run_json([BENCH, "train", data32] + ours)

        if torch_py:
            m, t = alternate(a.reps, mine, lambda: run_json([torch_py, TORCH_SCRIPT, "train", data32, "--threads", "1"] + theirs, env=single))
            mv, tv = median([r[key] for r in m]), median([r[key] for r in t])
            ratio = median([x[key] / y[key] for x, y in zip(m, t)])
            report(f"   {label:<34} {mv:>14,.0f} {tv:>14,.0f} {ratio:>6.2f}x   ({unit}; ratio: median of the {a.reps} paired ratios)")
        else:
            m = [mine() for _ in range(a.reps)]
            mv = median([r[key] for r in m])
            report(f"   {label:<34} {mv:>14,.0f} {'skipped':>14}   ({unit})")
        if i == 0:
            reference = (m, paired_peaks)
    runs, paired_peaks = reference
    params = runs[0]["parameters"]
    achieved = [6 * params * r["samples_per_second"] / 1e9 for r in runs]
    mm = run_json([BENCH, "matmul"])
    report("   matrix kernels, single thread, GFLOP/s (best of 5; tabcard's portable kernels and the gemm crate tabcard 0.2 used, each at the same dispatch level; target 0.9x):")
    levels = list(mm["kernel_gflops"])
    report(f"     {'product (m x k x n)':<32}" + "".join(f"{l:>9}{'gemm':>9}{'ratio':>7}" for l in levels))
    for shape in mm["kernel_gflops"][levels[0]]:
        cells = []
        for l in levels:
            ours, theirs = mm["kernel_gflops"][l][shape], mm["gemm_gflops"][l][shape]
            cells.append(f"{ours:>9.1f}{theirs:>9.1f}{ours / theirs:>7.2f}")
        report(f"     {shape:<32}" + "".join(cells))
    if paired_peaks:
        top = levels[-1]
        share = mm["kernel_gflops"][top]["256x256x256 h W2"] / median(paired_peaks)
        report(f"     256x256x256 at {top}: {100 * share:.0f}% of the numpy/torch single-core peak measured in this run (median {median(paired_peaks):.0f} GFLOP/s)")
    if a.previous:
        def new(level):
            return lambda: run_json([BENCH, "train", data32, "--hidden", "256,256"], env=dict(os.environ, TABCARD_KERNEL=level))
        old = lambda: run_json([a.previous, "train", data32, "--hidden", "256,256"])
        report("   reference MLP, this engine against tabcard 0.2.0's gemm-based engine (samples/s, one core, same data and settings):")
        for level in reversed(levels):
            if level == "scalar":
                continue
            n, o = alternate(a.reps, new(level), old)
            ratio = median([x["samples_per_second"] / y["samples_per_second"] for x, y in zip(n, o)])
            report(f"     portable kernels at {level:<7} {median([r['samples_per_second'] for r in n]):>10,.0f}   tabcard 0.2.0 {median([r['samples_per_second'] for r in o]):>10,.0f}   ratio {ratio:.2f}x (median of {a.reps} paired ratios)")
    # The fastest single-thread product this run measured (tabcard's or gemm's, any shape, the
    # widest level): a peak the machine demonstrably reaches, which numpy's OpenBLAS may not.
    top = levels[-1]
    best_product = max(max(mm["kernel_gflops"][top].values()), max(mm["gemm_gflops"][top].values()))
    report(f"   reference MLP: {median(achieved):.1f} GFLOP/s = {100 * median(achieved) / best_product:.0f}% of the fastest single-thread product in the table above ({best_product:.1f} GFLOP/s at {top}; target 75%)")
    if paired_peaks:
        shares = [x / p for x, p in zip(achieved, paired_peaks)]
        report(f"   single-core float32 matmul peak (numpy/torch 1024x1024, best of 20), measured before each reference run: {', '.join(f'{p:.0f}' for p in paired_peaks)} GFLOP/s")
        report(f"   reference MLP: {median(achieved):.1f} GFLOP/s at 6 x {params} parameters per sample; share of the peak measured beside it: median {100 * median(shares):.0f}% (each: {', '.join(f'{100 * x:.0f}%' for x in shares)})")
    else:
        report(f"   reference MLP: {median(achieved):.1f} GFLOP/s at 6 x {params} parameters per sample (no peak measured: numpy unavailable)")

    report("\n2. sweep, two cores: 8 runs (reference configuration x 8 seeds), 80,000 training rows each, 3 epochs")
    sweep_manifest = os.path.join(w, "sweep.toml")
    manifest(sweep_manifest, data32, "[256, 256]", 3, "[1, 2, 3, 4, 5, 6, 7, 8]", 256, 0.1, 0.1)

    def fresh(name):
        path = os.path.join(w, name)
        shutil.rmtree(path, ignore_errors=True)
        return path

    def tabcard_sweep(jobs="2"):
        results = fresh("sweep-results")
        wall = timed([TABCARD, "--quiet", "train", sweep_manifest, "--jobs", jobs, "--results", results])
        folder = next(os.path.join(results, d) for d in os.listdir(results) if os.path.isdir(os.path.join(results, d)))
        with open(os.path.join(folder, "timing.json")) as f:
            runs = json.load(f)["run_seconds"]
        # Whole command, and the training runs alone spread over the workers (each run's own clock
        # includes building its model, its first epoch and its final pass).
        return wall, sum(runs.values()) / int(jobs)

    torch_args = [TORCH_SCRIPT, "train", data32, "--train-rows", "80000", "--validation-rows", "10000"]

    def torch_one_process():
        started = time.perf_counter()
        r = run_json([torch_py] + torch_args + ["--threads", "2", "--seeds", "8"], env=single)
        return time.perf_counter() - started, r["seconds"]

    def torch_two_processes():
        started = time.perf_counter()
        procs = [subprocess.Popen([torch_py] + torch_args + ["--threads", "1", "--seeds", "4", "--first-seed", first], env=single, stdout=subprocess.PIPE, text=True)
                 for first in ("1", "5")]
        outs = [json.loads(p.communicate()[0].strip().splitlines()[-1]) for p in procs]
        return time.perf_counter() - started, max(o["seconds"] for o in outs)

    if torch_py:
        results = {"t": [], "p1": [], "p2": []}
        for _ in range(a.reps):
            results["t"].append(tabcard_sweep())
            results["p1"].append(torch_one_process())
            results["p2"].append(torch_two_processes())
        tw, tr = median([x[0] for x in results["t"]]), median([x[1] for x in results["t"]])
        p1w, p1t = median([x[0] for x in results["p1"]]), median([x[1] for x in results["p1"]])
        p2w, p2t = median([x[0] for x in results["p2"]]), median([x[1] for x in results["p2"]])
        report(f"   {'setup':<62} {'whole process':>14} {'training':>10}")
        report(f"   {'tabcard train --jobs 2 (load, hash, 8 runs, selection, test, card)':<62} {tw:>13.1f}s {tr:>9.1f}s")
        report(f"   {'PyTorch, one process, 2 intra-op threads, 8 runs in a row':<62} {p1w:>13.1f}s {p1t:>9.1f}s")
        report(f"   {'PyTorch, two 1-thread processes side by side, 4 runs each':<62} {p2w:>13.1f}s {p2t:>9.1f}s")
        best_w, best_t = min(p1w, p2w), min(p1t, p2t)
        report(f"   ratio against the better PyTorch setup: whole process {best_w / tw:.2f}x, training {best_t / tr:.2f}x")
        report("   (training: PyTorch's timed epochs after a warm-up epoch; tabcard's run clocks, which also include each run's")
        report("   first epoch, model construction and final pass, summed and divided by the 2 workers)")
        mv = tw
    else:
        mv = median([tabcard_sweep()[0] for _ in range(a.reps)])
        report(f"   tabcard train --jobs 2: {mv:.1f} s (PyTorch skipped)")
    one = median([tabcard_sweep("1")[0] for _ in range(max(1, a.reps // 2))])
    report(f"   scaling: --jobs 1 {one:.1f} s vs --jobs 2 {mv:.1f} s = {one / mv:.2f}x on 2 cores")

    report("\n3. hashing and loading")
    data_big = os.path.join(w, "synthetic-615k-x32.parquet")
    info = run_json([BENCH, "data", "615000", "32", data_big])
    mb = info["bytes"] / 1e6
    h = [run_json([BENCH, "hash", data_big]) for _ in range(a.reps)]
    sums = [timed(["sha256sum", data_big]) for _ in range(a.reps)]
    file_gb = median([x["file_hash_gb_s"] for x in h])
    raw_gb = median([x["sha2_in_memory_gb_s"] for x in h])
    content_gb = median([x["content_hash_gb_s"] for x in h])
    sum_gb = info["bytes"] / 1e9 / median(sums)
    report(f"   {mb:.0f} MB Parquet file: file hash {file_gb:.2f} GB/s; sha2 on the same bytes in memory {raw_gb:.2f} GB/s; ratio {file_gb / raw_gb:.2f}")
    report(f"   coreutils sha256sum on the file: {sum_gb:.2f} GB/s (tabcard file hash / sha256sum = {file_gb / sum_gb:.2f}x)")
    report(f"   logical content hash: {content_gb:.2f} GB/s of file bytes = {content_gb / file_gb:.2f} of the file hash's speed")
    ld = [run_json([BENCH, "load", data_big]) for _ in range(a.reps)]
    report(f"   Parquet -> table {median([x['parquet_to_table_mb_s'] for x in ld]):.0f} MB/s; table -> standardised f32 matrix {median([x['table_to_matrix_mb_s'] for x in ld]):.0f} MB/s; end to end {median([x['parquet_to_matrix_mb_s'] for x in ld]):.0f} MB/s of matrix")

    report("\n4. scale: one epoch of the reference MLP 64-256-256-1; the engine alone on an in-memory 1,000,000 x 64 matrix, then")
    report("   whole commands (read, hash, check, split, matrices, 1 run, test, card) at 1,000,000 and 10,000,000 rows x 64")
    s = run_json([BENCH, "scale", "1000000", "64"])
    report(f"   engine: {s['samples_per_second']:,.0f} samples/s, {s['seconds']:.1f} s; peak RSS {s['peak_rss_mb']:.0f} MB = {s['rss_over_matrix_plus_model']:.2f} x (f32 matrix {s['matrix_mb']:.0f} MB + model {s['model_mb']:.2f} MB)")
    for rows in ([1_000_000] + ([] if a.skip_10m else [10_000_000])):
        whole_command_memory(report, w, rows, 64)

    with open(os.path.join(w, "summary.txt"), "w") as f:
        f.write("\n".join(lines) + "\n")


def whole_command_memory(report, w, rows, cols, jobs="2", keep=False):
    """Peak RSS and wall time of a whole `tabcard train` (one run, one epoch) with `--jobs jobs` on
    a rows x cols file of float32 features, with the phases its timing record gives; the file is
    deleted afterwards unless `keep`."""
    data = os.path.join(w, f"synthetic-{rows}-x{cols}.parquet")
    if os.path.exists(data) and keep:
        info = {"bytes": os.path.getsize(data)}
    else:
        info = run_json([BENCH, "data", str(rows), str(cols), data])
    scale_manifest = os.path.join(w, f"scale-{rows}.toml")
    manifest(scale_manifest, data, "[256, 256]", 1, "[1]", 256, 0.1, 0.1)
    results = os.path.join(w, f"scale-results-{rows}")
    shutil.rmtree(results, ignore_errors=True)
    seconds, rss = peak_rss_of([TABCARD, "train", scale_manifest, "--jobs", jobs, "--results", results])
    params = cols * 256 + 256 + 256 * 256 + 256 + 256 + 1
    model = params * 4
    full = rows * cols * 4
    train = (rows - 2 * round(rows * 0.1)) * cols * 4
    report(f"   whole `tabcard train` at {rows:,} x {cols} ({info['bytes'] / 1e9:.2f} GB file, one run, one epoch, --jobs {jobs}): {seconds:.1f} s, peak RSS {rss / 1e6:,.0f} MB")
    report(f"     = {rss / (full + model):.2f} x (f32 matrix of every row {full / 1e6:,.0f} MB + model {model / 1e6:.2f} MB); "
           f"{rss / (train + model):.2f} x the training split's matrix alone ({train / 1e6:,.0f} MB)")
    timing = [os.path.join(results, d, "timing.json") for d in os.listdir(results) if os.path.isdir(os.path.join(results, d))]
    with open(timing[0]) as f:
        record = json.load(f)
    top = [p for p in record.get("phases", []) if not p.get("within")]

    def described(p):
        parts = [q for q in record.get("phases", []) if q.get("within") == p["name"]]
        listed = ", ".join("%s %.1f s" % (q["name"], q["seconds"]) for q in parts)
        inside = f" ({listed})" if parts else ""
        return f"{p['name']} {p['seconds']:.1f} s{inside}"

    phases = ", ".join(described(p) for p in top)
    report(f"     where the time goes: {phases} (the timing record's wall time, {record['wall_seconds']:.1f} s, ends before the card is written)")
    if not keep:
        os.remove(data)
    shutil.rmtree(results, ignore_errors=True)


def cpu_model():
    try:
        with open("/proc/cpuinfo") as f:
            for line in f:
                if line.startswith("model name"):
                    name = line.split(":", 1)[1].strip()
                    break
            else:
                name = "unknown CPU"
        with open("/proc/cpuinfo") as f:
            flags = next((l for l in f if l.startswith("flags")), "")
        extras = [x for x in ("avx2", "avx512f", "sha_ni") if f" {x}" in flags]
        return f"{name} ({', '.join(extras)})"
    except OSError:
        return "unknown CPU"


if __name__ == "__main__":
    sys.exit(main())
