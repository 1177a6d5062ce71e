"""Tiny seeded digit models for the converter and simulator tests (trained for about a second).

scikit-learn's bundled digits (1,797 8x8 images, values 0-16; Alpaydin & Kaynak 1998) are
upsampled to 16x16 and binarized at 8, or kept as counts clipped to 3 for count-frame tests.
"""

from __future__ import annotations

import functools

import numpy as np
import torch
from sklearn.datasets import load_digits
from torch import nn


@functools.lru_cache(maxsize=None)
def digits(binary: bool = True):
    d = load_digits()
    x = d.images.astype(np.float32)                                   # (1797, 8, 8), values 0..16
    x = np.kron(x, np.ones((1, 2, 2), dtype=np.float32))[:, None]      # (1797, 1, 16, 16)
    x = (x >= 8).astype(np.float32) if binary else np.minimum(np.floor(x / 4), 3).astype(np.float32)
    return x, d.target.astype(np.int64)


def split(binary: bool = True):
    x, y = digits(binary)
    return (x[:1200], y[:1200]), (x[1200:], y[1200:])


def make_model(kind: str, seed: int = 0) -> nn.Sequential:
    torch.manual_seed(seed)
    if kind == "conv_max":
        return nn.Sequential(nn.Conv2d(1, 6, 3, padding=1), nn.BatchNorm2d(6), nn.ReLU(), nn.MaxPool2d(2),
                             nn.Conv2d(6, 8, 3, stride=2), nn.ReLU(), nn.Flatten(), nn.Dropout(0.1),
                             nn.Linear(8 * 3 * 3, 10))
    if kind == "conv_avg":
        return nn.Sequential(nn.Conv2d(1, 6, 3, padding=1), nn.ReLU(), nn.AvgPool2d(2),
                             nn.Conv2d(6, 8, 3, padding=1), nn.BatchNorm2d(8), nn.ReLU(), nn.AvgPool2d(2),
                             nn.Flatten(), nn.Linear(8 * 4 * 4, 24), nn.BatchNorm1d(24), nn.ReLU(),
                             nn.Linear(24, 10))
    if kind == "mlp":
        return nn.Sequential(nn.Flatten(), nn.Linear(256, 32), nn.ReLU(), nn.Linear(32, 10))
    raise ValueError(kind)


@functools.lru_cache(maxsize=None)
def trained(kind: str, binary: bool = True, epochs: int = 5, seed: int = 0) -> nn.Sequential:
    """A few epochs of Adam on the first 1,200 digits: enough for ~90-97% test accuracy."""
    torch.set_num_threads(1)   # small models; a second thread only spins on a shared 2-core machine
    (xtr, ytr), _ = split(binary)
    model = make_model(kind, seed)
    opt = torch.optim.Adam(model.parameters(), lr=3e-3)
    g = torch.Generator().manual_seed(seed)
    X, Y = torch.from_numpy(xtr), torch.from_numpy(ytr)
    model.train()
    for _ in range(epochs):
        for idx in torch.randperm(len(X), generator=g).split(50):
            opt.zero_grad()
            nn.functional.cross_entropy(model(X[idx]), Y[idx]).backward()
            opt.step()
    model.eval()
    return model


def accuracy(model, x, y) -> float:
    with torch.no_grad():
        return float((model(torch.from_numpy(x)).argmax(1).numpy() == y).mean())
