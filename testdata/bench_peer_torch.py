#!/usr/bin/python3
"""The PyTorch side of `make bench-peer` (run by testdata/bench-peer.sh).

train: trains the same model as `weft bench` (embedding, a stack of LSTM or
GRU layers, a linear output layer, mean cross-entropy over every position,
global gradient-norm clipping, Adam or SGD) by truncated BPTT on uniform
synthetic tokens, carrying the hidden state across windows detached from
the graph, in float32 on the CPU. Untimed warm-up windows come first. Prints
one JSON object: tokens_per_second, the shape, the threads and, when it can
see them, the BLAS library and the OpenBLAS kernel ("core") it runs.

summarize: reads the JSON lines the shell script collected (one object per
run, with "engine", "config" and "threads" added) and prints the Markdown
table of medians and ratios, and writes the JSON summary.
"""

import argparse
import ctypes
import json
import os
import statistics
import sys
import time


def blas_info():
    """The BLAS shared library loaded into this process and, for OpenBLAS,
    its kernel name and thread count (openblas_get_corename and
    openblas_get_num_threads of its C interface)."""
    libs = set()
    with open("/proc/self/maps") as f:
        for line in f:
            path = line.split()[-1]
            if "blas" in path.lower() and path.startswith("/"):
                libs.add(path)
    info = {"blas_libraries": sorted(libs)}
    for path in sorted(libs):
        if "openblas" not in path:
            continue
        try:
            lib = ctypes.CDLL(path)
            lib.openblas_get_corename.restype = ctypes.c_char_p
            info["openblas_core"] = lib.openblas_get_corename().decode()
            info["openblas_threads"] = lib.openblas_get_num_threads()
        except (OSError, AttributeError):
            pass
        break
    return info


def train(a):
    import torch
    from torch import nn

    torch.set_num_threads(a.threads)
    torch.manual_seed(a.seed)
    V, E, H, B, T, L = a.vocab, a.embedding, a.hidden, a.batch, a.unroll, a.layers
    rnn_class = {"lstm": nn.LSTM, "gru": nn.GRU}[a.cell]

    class Net(nn.Module):
        def __init__(self):
            super().__init__()
            self.emb = nn.Embedding(V, E)
            self.rnn = rnn_class(E, H, num_layers=L)  # time-major (T, B, ·)
            self.out = nn.Linear(H, V)

        def forward(self, x, state):
            y, state = self.rnn(self.emb(x), state)
            return self.out(y), state

    net = Net().float()
    if a.optimizer == "adam":
        opt = torch.optim.Adam(net.parameters(), lr=a.lr, betas=(0.9, 0.999), eps=1e-8)
    else:
        opt = torch.optim.SGD(net.parameters(), lr=a.lr)
    loss_fn = nn.CrossEntropyLoss()
    n = a.warmup + a.windows
    g = torch.Generator().manual_seed(a.seed)
    seq = torch.randint(0, V, (n * T + 1, B), generator=g)  # B continuous streams
    zeros = torch.zeros(L, B, H)
    state = (zeros, zeros.clone()) if a.cell == "lstm" else zeros

    def detach(s):
        return tuple(t.detach() for t in s) if isinstance(s, tuple) else s.detach()

    times = []
    loss_value = 0.0
    for k in range(n):
        x, y = seq[k * T:(k + 1) * T], seq[k * T + 1:(k + 1) * T + 1]
        t0 = time.perf_counter()
        opt.zero_grad(set_to_none=True)
        logits, state = net(x, detach(state))
        loss = loss_fn(logits.reshape(T * B, V), y.reshape(T * B))
        loss.backward()
        nn.utils.clip_grad_norm_(net.parameters(), a.clip)
        opt.step()
        loss_value = loss.item()
        dt = time.perf_counter() - t0
        if k >= a.warmup:
            times.append(dt)
    total = sum(times)
    rep = {
        "engine": "torch",
        "torch_version": torch.__version__,
        "threads": torch.get_num_threads(),
        "model": {"cell": a.cell, "layers": L, "vocab": V, "embedding": E, "hidden": H,
                  "batch": B, "unroll": T, "optimizer": a.optimizer, "dtype": "float32"},
        "warmup_windows": a.warmup,
        "windows": a.windows,
        "tokens": a.windows * T * B,
        "seconds": total,
        "window_seconds_median": statistics.median(times),
        "tokens_per_second": a.windows * T * B / total,
        "final_loss_nats": loss_value,
        "openblas_env": {k: os.environ.get(k) for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE", "OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")},
    }
    rep.update(blas_info())
    print(json.dumps(rep))


def summarize(a):
    runs = [json.loads(line) for line in open(a.runs) if line.strip()]
    configs = []
    for r in runs:
        if r["config"] not in configs:
            configs.append(r["config"])

    def med(config, engine, threads):
        v = [r["tokens_per_second"] for r in runs
             if r["config"] == config and r["engine"] == engine and r["requested_threads"] == threads]
        return (statistics.median(v), len(v)) if v else (None, 0)

    rows = []
    for c in configs:
        t1, n1 = med(c, "torch", 1)
        t2, n2 = med(c, "torch", 2)
        best = max(x for x in (t1, t2) if x is not None)
        for th in (1, 2):
            w, nw = med(c, "weft", th)
            if w is None:
                continue
            same = t1 if th == 1 else t2
            rows.append({
                "config": c, "threads": th, "weft_tokens_per_second": w, "weft_runs": nw,
                "torch_1_thread_tokens_per_second": t1, "torch_2_threads_tokens_per_second": t2,
                "torch_runs": min(n1, n2),
                "torch_best_tokens_per_second": best,
                "ratio_vs_torch_best": w / best,
                "ratio_vs_torch_same_threads": w / same if same else None,
            })
    info = {}
    for r in runs:
        if r["engine"] == "torch":
            info = {k: r.get(k) for k in ("torch_version", "blas_libraries", "openblas_core")}
            break
    info["openblas_threads_by_setting"] = {str(r["requested_threads"]): r.get("openblas_threads")
                                           for r in runs if r["engine"] == "torch"}
    speedup = {}
    for c in configs:
        w1, _ = med(c, "weft", 1)
        w2, _ = med(c, "weft", 2)
        if w1 and w2:
            speedup[c] = w2 / w1
    out = {"rows": rows, "weft_2_thread_speedup": speedup, "torch": info, "runs": runs}
    with open(a.json, "w") as f:
        json.dump(out, f, indent=2)
        f.write("\n")

    def k(x):
        return "n/a" if x is None else f"{x:,.0f}"

    print("| config | threads | weft tok/s | torch tok/s (1 thread / 2 threads) | weft / torch best | weft / torch same threads |")
    print("|---|---|---|---|---|---|")
    for r in rows:
        same = r["ratio_vs_torch_same_threads"]
        print(f"| {r['config']} | {r['threads']} | {k(r['weft_tokens_per_second'])} | "
              f"{k(r['torch_1_thread_tokens_per_second'])} / {k(r['torch_2_threads_tokens_per_second'])} | "
              f"{r['ratio_vs_torch_best']:.2f} | {'n/a' if same is None else f'{same:.2f}'} |")
    print()
    for c, s in speedup.items():
        print(f"weft 2-thread speedup over 1 thread, {c}: {s:.2f}x")
    print(f"medians of {rows[0]['weft_runs'] if rows else 0} runs per cell; PyTorch {info.get('torch_version')}, "
          f"BLAS {', '.join(info.get('blas_libraries') or ['unknown'])}, OpenBLAS kernel {info.get('openblas_core', 'unknown')}")


def main():
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    sub = p.add_subparsers(dest="cmd", required=True)
    t = sub.add_parser("train")
    t.add_argument("--cell", choices=["lstm", "gru"], default="lstm")
    t.add_argument("--layers", type=int, default=1)
    t.add_argument("--vocab", type=int, default=96)
    t.add_argument("--embedding", type=int, default=64)
    t.add_argument("--hidden", type=int, default=256)
    t.add_argument("--batch", type=int, default=32)
    t.add_argument("--unroll", type=int, default=64)
    t.add_argument("--windows", type=int, default=20)
    t.add_argument("--warmup", type=int, default=2)
    t.add_argument("--threads", type=int, default=1)
    t.add_argument("--optimizer", choices=["adam", "sgd"], default="adam")
    t.add_argument("--lr", type=float, default=0.002)
    t.add_argument("--clip", type=float, default=5.0)
    t.add_argument("--seed", type=int, default=1)
    s = sub.add_parser("summarize")
    s.add_argument("runs")
    s.add_argument("json")
    a = p.parse_args()
    if a.cmd == "train":
        train(a)
    else:
        summarize(a)


if __name__ == "__main__":
    sys.exit(main())
