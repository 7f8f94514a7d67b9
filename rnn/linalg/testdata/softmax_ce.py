# Reference values for TestSoftmaxCrossEntropyTorch (elementwise_test.go):
# summed cross-entropy in nats and its gradient with respect to the logits,
# from PyTorch (Debian python3-torch), float64.
# Run: /usr/bin/python3 softmax_ce.py > softmax_ce.out
import torch

logits = torch.tensor([
    [0.5, -1.25, 3.0, 0.0, 2.5],
    [-4.0, 10.0, 9.5, -0.5, 1.0],
    [0.1, 0.2, 0.3, 0.4, 0.5],
], dtype=torch.float64, requires_grad=True)
targets = torch.tensor([2, 0, 4])
loss = torch.nn.functional.cross_entropy(logits, targets, reduction="sum")
loss.backward()
print("torch", torch.__version__)
print("loss %.17g" % loss.item())
for row in logits.grad.tolist():
    print("grad", " ".join("%.17g" % v for v in row))
