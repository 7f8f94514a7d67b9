#!/usr/bin/python3
"""Reference forward values and gradients for weft's recurrent cells, from
PyTorch (Debian python3-torch 1.13.1, which reports its version as
1.13.0a0; CPU, float64).

Run from this folder with /usr/bin/python3 torch_reference.py; it writes
torch_reference.json, which rnn/reference_test.go embeds. The network is
embedding (V=5, E=3) -> 2 recurrent layers (H=4) -> linear output (V=5),
with the mean cross-entropy over T=3 steps of B=2 streams, started from a
non-zero carried state. Every weight is set deterministically:

    W[r, c] = 0.1 * sin(1 + r + 0.5 c + k)

with k the tensor's index in the order below (so no two tensors are equal).
The JSON holds each tensor under weft's name and layout (the mapping is the
one in rnn's package documentation):

    weft layer.L.input_weight      = torch weight_ih_lL  (gate blocks in torch order)
    weft layer.L.recurrent_weight  = torch weight_hh_lL
    weft layer.L.bias              = bias_ih_lL + bias_hh_lL   (rnn, lstm)
                                   = [b_ir+b_hr, b_iz+b_hz, b_in]  (gru)
    weft layer.L.recurrent_bias    = b_hn                          (gru only)

torch.nn has no reset-before GRU (Cho et al. 2014); that case is written
out in torch operations, with its weights set in weft's layout directly.
"""
import json
import math

import torch

torch.set_default_dtype(torch.float64)

V, E, H, L, T, B = 5, 3, 4, 2, 3, 2
INPUTS = [[0, 3], [4, 1], [2, 2]]   # [t][b]
TARGETS = [[1, 4], [0, 2], [3, 1]]  # [t][b]


def det(shape, k):
    if len(shape) == 1:
        return torch.tensor([0.1 * math.sin(1 + r + k) for r in range(shape[0])])
    rows, cols = shape
    return torch.tensor([[0.1 * math.sin(1 + r + 0.5 * c + k) for c in range(cols)] for r in range(rows)])


def case(kind, nonlinearity="tanh"):
    emb = torch.nn.Embedding(V, E)
    if kind == "rnn":
        net = torch.nn.RNN(E, H, num_layers=L, nonlinearity=nonlinearity)
    elif kind == "lstm":
        net = torch.nn.LSTM(E, H, num_layers=L)
    else:
        net = torch.nn.GRU(E, H, num_layers=L)
    out = torch.nn.Linear(H, V)
    k = 0
    with torch.no_grad():
        for p in [emb.weight] + [p for _, p in net.named_parameters()] + [out.weight, out.bias]:
            p.copy_(det(tuple(p.shape), k))
            k += 1
        # Scale the weights up so the nonlinearities are not near-linear.
        for _, p in net.named_parameters():
            p.mul_(5)
    h0 = torch.stack([det((B, H), 50 + l)[:, :] * 3 for l in range(L)])
    c0 = torch.stack([det((B, H), 60 + l)[:, :] * 3 for l in range(L)])
    x = emb(torch.tensor(INPUTS))
    if kind == "lstm":
        y, (hT, cT) = net(x, (h0, c0))
    else:
        y, hT = net(x, h0)
        cT = None
    logits = out(y)  # T x B x V
    loss = torch.nn.functional.cross_entropy(logits.reshape(T * B, V), torch.tensor(TARGETS).reshape(T * B))
    loss.backward()

    def flat(t):
        return [float(v) for v in t.detach().reshape(-1)]

    tensors = {}

    def put(name, value, grad):
        tensors[name] = {"shape": list(value.shape), "value": flat(value), "grad": flat(grad)}

    put("embedding.weight", emb.weight, emb.weight.grad)
    for l in range(L):
        wi, wh = getattr(net, f"weight_ih_l{l}"), getattr(net, f"weight_hh_l{l}")
        bi, bh = getattr(net, f"bias_ih_l{l}"), getattr(net, f"bias_hh_l{l}")
        put(f"layer.{l}.input_weight", wi, wi.grad)
        put(f"layer.{l}.recurrent_weight", wh, wh.grad)
        if kind == "gru":
            b = torch.cat([bi[:2 * H] + bh[:2 * H], bi[2 * H:]])
            # d/d(b_ir) = d/d(b_hr), so either grad is weft's bias grad.
            assert torch.allclose(bi.grad[:2 * H], bh.grad[:2 * H], rtol=0, atol=1e-15)
            put(f"layer.{l}.bias", b.detach(), bi.grad)
            put(f"layer.{l}.recurrent_bias", bh[2 * H:].detach(), bh.grad[2 * H:])
        else:
            assert torch.allclose(bi.grad, bh.grad, rtol=0, atol=1e-15)
            put(f"layer.{l}.bias", (bi + bh).detach(), bi.grad)
    put("output.weight", out.weight, out.weight.grad)
    put("output.bias", out.bias, out.bias.grad)
    res = {
        "loss": float(loss),
        "logits": flat(logits),
        "h0": flat(h0),
        "final_h": flat(hT),
        "tensors": tensors,
    }
    if kind == "lstm":
        res["c0"] = flat(c0)
        res["final_c"] = flat(cT)
    return res


def case_gru_reset_before():
    """The GRU of Cho et al. (2014), reset before the recurrent product,
    n = tanh(W_n x + b_n + U_n (r * h)), which torch.nn has no module for:
    written out in torch operations (autograd gives the gradients), with the
    weights directly in weft's layout and names."""
    k = 0
    params = {}

    def new(name, shape, scale=1.0):
        nonlocal k
        t = (det(shape, k) * scale).requires_grad_(True)
        k += 1
        params[name] = t
        return t

    emb = new("embedding.weight", (V, E))
    layers = []
    for l in range(L):
        I = E if l == 0 else H
        layers.append((new(f"layer.{l}.input_weight", (3 * H, I), 5),
                       new(f"layer.{l}.recurrent_weight", (3 * H, H), 5),
                       new(f"layer.{l}.bias", (3 * H,), 5)))
    ow = new("output.weight", (V, H))
    ob = new("output.bias", (V,))
    h0 = torch.stack([det((B, H), 50 + l) * 3 for l in range(L)])
    hs = [h0[l] for l in range(L)]
    outs = []
    for t in range(T):
        x = emb[torch.tensor(INPUTS[t])]
        for l, (wi, wh, b) in enumerate(layers):
            h = hs[l]
            xg = x @ wi.T + b
            rz = h @ wh[:2 * H].T
            r = torch.sigmoid(xg[:, :H] + rz[:, :H])
            z = torch.sigmoid(xg[:, H:2 * H] + rz[:, H:])
            n = torch.tanh(xg[:, 2 * H:] + (r * h) @ wh[2 * H:].T)
            h = (1 - z) * n + z * h
            hs[l] = h
            x = h
        outs.append(x @ ow.T + ob)
    logits = torch.stack(outs)
    loss = torch.nn.functional.cross_entropy(logits.reshape(T * B, V), torch.tensor(TARGETS).reshape(T * B))
    loss.backward()

    def flat(t):
        return [float(v) for v in t.detach().reshape(-1)]

    return {
        "loss": float(loss),
        "logits": flat(logits),
        "h0": flat(h0),
        "final_h": flat(torch.stack(hs)),
        "tensors": {name: {"shape": list(p.shape), "value": flat(p), "grad": flat(p.grad)} for name, p in params.items()},
    }


# A realistic float32 case: 2 layers of 256 units over a whole training
# window of 35 steps and 4 streams, V = E = 64, weights by det() as above
# times scale32(), a non-zero carried state; computed in float32, the path
# weft trains on, and in float64 as the reference the Go test compares
# with. Written to torch_float32_reference.json: the loss, the final hidden
# states, every gradient tensor's Euclidean norm and 64 of its entries at
# indices (j * 7919) mod size, and, for calibration, how far PyTorch's own
# float32 run is from its float64 one (the norm-wise relative error of each
# quantity).
V32, E32, H32, L32, T32, B32 = 64, 64, 256, 2, 35, 4
SAMPLES = 64


def scale32(k):
    """The scale of tensor k (numbered as in case_window): the recurrent
    layers' tensors times 3, so that the gates work away from their linear
    middle, and the output weight times 5, so that the predictions are far
    from uniform."""
    if 1 <= k <= 4 * L32:
        return 3.0
    if k == 1 + 4 * L32:
        return 5.0
    return 1.0


def window_tokens():
    toks = [[(7 * t + 13 * b + t * t * (b + 1)) % V32 for b in range(B32)] for t in range(T32 + 1)]
    return toks[:T32], toks[1:]


def case_window(kind, dtype):
    torch.set_default_dtype(dtype)
    emb = torch.nn.Embedding(V32, E32)
    net = torch.nn.LSTM(E32, H32, num_layers=L32) if kind == "lstm" else torch.nn.GRU(E32, H32, num_layers=L32)
    out = torch.nn.Linear(H32, V32)
    k = 0
    with torch.no_grad():
        for p in [emb.weight] + [p for _, p in net.named_parameters()] + [out.weight, out.bias]:
            # det() in float64, times the scale, rounded once to the
            # run's type.
            p.copy_((det(tuple(p.shape), k) * scale32(k)).to(dtype))
            k += 1
    h0 = torch.stack([det((B32, H32), 50 + l) for l in range(L32)]).to(dtype)
    c0 = torch.stack([det((B32, H32), 60 + l) for l in range(L32)]).to(dtype)
    inputs, targets = window_tokens()
    x = emb(torch.tensor(inputs))
    if kind == "lstm":
        y, (hT, _) = net(x, (h0, c0))
    else:
        y, hT = net(x, h0)
    logits = out(y)
    loss = torch.nn.functional.cross_entropy(logits.reshape(T32 * B32, V32), torch.tensor(targets).reshape(T32 * B32))
    loss.backward()
    grads = {"embedding.weight": emb.weight.grad}
    for l in range(L32):
        bi, bh = getattr(net, f"bias_ih_l{l}"), getattr(net, f"bias_hh_l{l}")
        grads[f"layer.{l}.input_weight"] = getattr(net, f"weight_ih_l{l}").grad
        grads[f"layer.{l}.recurrent_weight"] = getattr(net, f"weight_hh_l{l}").grad
        grads[f"layer.{l}.bias"] = bi.grad  # d/d(bias_ih) = d/d(bias_hh) for the summed bias
        if kind == "gru":
            grads[f"layer.{l}.recurrent_bias"] = bh.grad[2 * H32:]
    grads["output.weight"] = out.weight.grad
    grads["output.bias"] = out.bias.grad
    torch.set_default_dtype(torch.float64)
    return float(loss), hT.detach().double().reshape(-1), {n: g.detach().double().reshape(-1) for n, g in grads.items()}


def window_reference():
    res = {"source": "PyTorch %s, torch_reference.py" % torch.__version__,
           "V": V32, "E": E32, "H": H32, "layers": L32, "T": T32, "B": B32}
    inputs, targets = window_tokens()
    res["inputs"] = [v for row in inputs for v in row]
    res["targets"] = [v for row in targets for v in row]
    res["cases"] = {}
    rel = lambda a, b: float((a - b).norm() / b.norm())
    for kind in ["lstm", "gru"]:
        l64, h64, g64 = case_window(kind, torch.float64)
        l32, h32, g32 = case_window(kind, torch.float32)
        tensors = {}
        for name, g in g64.items():
            idx = [(j * 7919) % g.numel() for j in range(SAMPLES)]
            tensors[name] = {"size": g.numel(), "norm": float(g.norm()), "indices": idx,
                             "values": [float(g[i]) for i in idx],
                             "torch_float32_rel_err": rel(g32[name], g)}
        res["cases"][kind] = {
            "loss": l64, "torch_float32_loss_rel_err": abs(l32 - l64) / abs(l64),
            "final_h": [float(v) for v in h64], "torch_float32_final_h_rel_err": rel(h32, h64),
            "tensors": tensors,
        }
    with open("torch_float32_reference.json", "w") as f:
        json.dump(res, f, indent=1)
        f.write("\n")


def main():
    torch.manual_seed(0)  # nothing random is drawn; set for good measure
    ref = {
        "source": "PyTorch %s, torch_reference.py" % torch.__version__,
        "V": V, "E": E, "H": H, "layers": L, "T": T, "B": B,
        "inputs": [v for row in INPUTS for v in row],
        "targets": [v for row in TARGETS for v in row],
        "cases": {
            "rnn-tanh": case("rnn", "tanh"),
            "rnn-relu": case("rnn", "relu"),
            "lstm": case("lstm"),
            "gru-reset-after": case("gru"),
            "gru-reset-before": case_gru_reset_before(),
        },
    }
    with open("torch_reference.json", "w") as f:
        json.dump(ref, f, indent=1)
        f.write("\n")
    window_reference()


if __name__ == "__main__":
    main()
