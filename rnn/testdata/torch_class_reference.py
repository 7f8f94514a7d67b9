#!/usr/bin/python3
"""Reference values and gradients for weft's class-based output layer, from
PyTorch (Debian python3-torch 1.13.1; CPU, float64) autograd.

Run from this folder with /usr/bin/python3 torch_class_reference.py; it
writes torch_class_reference.json, which rnn/reference_test.go embeds.

The network is embedding (V=7, E=3) -> one nn.LSTM layer (H=4) -> the
two-level softmax of Goodman (2001), written out in torch operations
(torch.nn has no such module; its AdaptiveLogSoftmaxWithLoss is a different
factorisation):

    s = W_c h + b_c                        class scores, C=3 classes
    u = W_y h + b_y                        word scores
    ln P(w | h) = log_softmax(s)[c(w)] + log_softmax(u[ids of c(w)])[w]

with the classes [0, 3), [3, 5), [5, 7) (what rnn.FrequencyClasses gives 7
ids of equal weight in 3 classes). The loss is the mean of -ln P over the
positions whose target is not -1, over T=3 steps of B=2 streams from a
non-zero carried state. Weights are set as in torch_reference.py:

    W[r, c] = 0.1 * sin(1 + r + 0.5 c + k), k the tensor's index,

the LSTM's scaled by 5 and the class layer's by 3 so that the softmaxes are
far from uniform.
"""
import json
import math

import torch

torch.set_default_dtype(torch.float64)

V, E, H, C, T, B = 7, 3, 4, 3, 3, 2
STARTS = [0, 3, 5, 7]
INPUTS = [[0, 3], [6, 1], [2, 5]]     # [t][b]
TARGETS = [[1, 4], [-1, 6], [3, 0]]   # [t][b]; -1: not scored


def det(shape, k):
    if len(shape) == 1:
        return torch.tensor([0.1 * math.sin(1 + r + k) for r in range(shape[0])])
    rows, cols = shape
    return torch.tensor([[0.1 * math.sin(1 + r + 0.5 * c + k) for c in range(cols)] for r in range(rows)])


def main():
    emb = torch.nn.Embedding(V, E)
    net = torch.nn.LSTM(E, H, num_layers=1)
    with torch.no_grad():
        k = 0
        for p in [emb.weight] + [p for _, p in net.named_parameters()]:
            p.copy_(det(tuple(p.shape), k))
            k += 1
        for _, p in net.named_parameters():
            p.mul_(5)
    wy = (det((V, H), 10) * 3).requires_grad_(True)
    by = (det((V,), 11) * 3).requires_grad_(True)
    wc = (det((C, H), 12) * 3).requires_grad_(True)
    bc = (det((C,), 13) * 3).requires_grad_(True)
    h0 = (det((B, H), 50) * 3).unsqueeze(0)
    c0 = (det((B, H), 60) * 3).unsqueeze(0)
    x = emb(torch.tensor(INPUTS))
    y, _ = net(x, (h0, c0))
    h = y.reshape(T * B, H)
    s = torch.log_softmax(h @ wc.T + bc, dim=1)
    u = h @ wy.T + by
    parts = []
    for k in range(C):
        a, b = STARTS[k], STARTS[k + 1]
        parts.append(s[:, k:k + 1] + torch.log_softmax(u[:, a:b], dim=1))
    logp = torch.cat(parts, dim=1)  # T*B x V, ln P(w | h) for every w
    targets = [t for row in TARGETS for t in row]
    scored = [(r, t) for r, t in enumerate(targets) if t >= 0]
    loss = -sum(logp[r, t] for r, t in scored) / len(scored)
    loss.backward()

    def flat(t):
        return [float(v) for v in t.detach().reshape(-1)]

    tensors = {}

    def put(name, value, grad):
        tensors[name] = {"shape": list(value.shape), "value": flat(value), "grad": flat(grad)}

    put("embedding.weight", emb.weight, emb.weight.grad)
    assert torch.allclose(net.bias_ih_l0.grad, net.bias_hh_l0.grad, rtol=0, atol=1e-15)
    put("layer.0.input_weight", net.weight_ih_l0, net.weight_ih_l0.grad)
    put("layer.0.recurrent_weight", net.weight_hh_l0, net.weight_hh_l0.grad)
    put("layer.0.bias", (net.bias_ih_l0 + net.bias_hh_l0).detach(), net.bias_ih_l0.grad)
    put("output.weight", wy, wy.grad)
    put("output.bias", by, by.grad)
    put("output.class_weight", wc, wc.grad)
    put("output.class_bias", bc, bc.grad)
    out = {
        "source": "PyTorch " + torch.__version__ + ", float64, torch_class_reference.py",
        "V": V, "E": E, "H": H, "C": C, "T": T, "B": B,
        "starts": STARTS,
        "inputs": [v for row in INPUTS for v in row],
        "targets": targets,
        "h0": flat(h0), "c0": flat(c0),
        "loss": float(loss),
        "logprobs": flat(logp),
        "tensors": tensors,
    }
    with open("torch_class_reference.json", "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")


if __name__ == "__main__":
    main()
