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
run, with "engine", "config" and "requested_threads" added) and prints the
Markdown table of medians, scaling and ratios at every thread count, and
writes the JSON summary.
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
    rep["torch_build"] = torch_build(torch)
    print(json.dumps(rep))


def torch_build(torch):
    """A short description of the PyTorch build: MKL, oneDNN (mkldnn) and
    the BLAS it was compiled against (BLAS_INFO of torch.__config__.show)."""
    parts = []
    try:
        cfg = torch.__config__.show()
        for item in cfg.replace("\n", ",").split(","):
            item = item.strip()
            if item.startswith("BLAS_INFO=") or item.startswith("LAPACK_INFO="):
                parts.append(item)
    except Exception:  # older builds: keep what the backends say
        pass
    parts.append("mkl %s" % ("yes" if torch.backends.mkl.is_available() else "no"))
    parts.append("onednn %s" % ("yes" if torch.backends.mkldnn.is_available() else "no"))
    return ", ".join(parts)


def summarize(a):
    """Medians per (config, engine, threads), ratios between engines at the
    same thread count and against the peer's best count, and each engine's
    scaling over its smallest thread count. Engines: "weft", "torch" and,
    when the script was given a second weft binary, "weft-old"; "weft" over
    "weft-old" is taken per round (the two ran back to back) and given as
    the median and range of those ratios."""
    runs = [json.loads(line) for line in open(a.runs) if line.strip()]
    runs = [r for r in runs if "tokens_per_second" in r]
    configs, threads, engines = [], [], []
    for r in runs:
        for lst, v in ((configs, r["config"]), (threads, r["requested_threads"]), (engines, r["engine"])):
            if v not in lst:
                lst.append(v)
    threads.sort()

    def vals(config, engine, th):
        return [r["tokens_per_second"] for r in runs
                if r["config"] == config and r["engine"] == engine and r["requested_threads"] == th]

    def med(config, engine, th):
        v = vals(config, engine, th)
        return statistics.median(v) if v else None

    rows = []
    for c in configs:
        torch_meds = [m for m in (med(c, "torch", th) for th in threads) if m is not None]
        best = max(torch_meds) if torch_meds else None
        base = {e: next((med(c, e, th) for th in threads if med(c, e, th) is not None), None) for e in engines}
        for th in threads:
            row = {"config": c, "threads": th}
            for e in engines:
                m = med(c, e, th)
                row[e + "_tokens_per_second"] = m
                row[e + "_runs"] = len(vals(c, e, th))
                row[e + "_range"] = [min(vals(c, e, th)), max(vals(c, e, th))] if m is not None else None
                row[e + "_scaling"] = m / base[e] if m is not None and base[e] else None
            w, t = row.get("weft_tokens_per_second"), row.get("torch_tokens_per_second")
            row["torch_best_tokens_per_second"] = best
            row["ratio_vs_torch_same_threads"] = w / t if w and t else None
            row["ratio_vs_torch_best"] = w / best if w and best else None
            if "weft-old" in engines:
                new = [r for r in runs if r["config"] == c and r["engine"] == "weft" and r["requested_threads"] == th]
                old = [r for r in runs if r["config"] == c and r["engine"] == "weft-old" and r["requested_threads"] == th]
                pairs = [n["tokens_per_second"] / o["tokens_per_second"] for n, o in zip(new, old)]
                row["ratio_vs_weft_old"] = (w / row["weft-old_tokens_per_second"]
                                            if w and row["weft-old_tokens_per_second"] else None)
                row["ratio_vs_weft_old_per_round"] = [min(pairs), max(pairs)] if pairs else None
                row["ratio_vs_weft_old_per_round_median"] = statistics.median(pairs) if pairs else None
            rows.append(row)
    info = {}
    for r in runs:
        if r["engine"] == "torch":
            info = {k: r.get(k) for k in ("torch_version", "torch_build", "blas_libraries", "openblas_core")}
            break
    out = {"rows": rows, "torch": info, "runs": runs}
    with open(a.json, "w") as f:
        json.dump(out, f, indent=2)
        f.write("\n")

    def k(x):
        return "n/a" if x is None else f"{x:,.0f}"

    def r2(x):
        return "n/a" if x is None else f"{x:.2f}"

    cols = [e for e in ("weft", "weft-old", "torch") if e in engines]
    head = ["config", "threads"] + [f"{e} tok/s (scaling)" for e in cols]
    if "torch" in engines and "weft" in engines:
        head += ["weft / torch same threads", "weft / torch best"]
    if "weft-old" in engines:
        head += ["weft / weft-old: median of rounds (range)"]
    print("| " + " | ".join(head) + " |")
    print("|" + "---|" * len(head))
    for r in rows:
        cells = [r["config"], str(r["threads"])]
        for e in cols:
            cells.append(f"{k(r[e + '_tokens_per_second'])} ({r2(r[e + '_scaling'])}x)")
        if "torch" in engines and "weft" in engines:
            cells += [r2(r["ratio_vs_torch_same_threads"]), r2(r["ratio_vs_torch_best"])]
        if "weft-old" in engines:
            pr = r["ratio_vs_weft_old_per_round"]
            cells.append(f"{r2(r['ratio_vs_weft_old_per_round_median'])} ({r2(pr[0])}-{r2(pr[1])})" if pr else "n/a")
        print("| " + " | ".join(cells) + " |")
    print()
    n = max((r.get("weft_runs", 0) for r in rows), default=0)
    print(f"medians of {n} runs per cell; scaling is over each engine's smallest thread count")
    if info:
        print(f"peer: PyTorch {info.get('torch_version')} ({info.get('torch_build')}), "
              f"BLAS {', '.join(info.get('blas_libraries') or ['unknown'])}, OpenBLAS kernel {info.get('openblas_core', 'n/a')}")


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
