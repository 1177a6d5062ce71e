"""Training-time augmentation of frames: pixel jitter and event dropout, drawn from one torch.Generator."""

from __future__ import annotations

import torch


def augment(x: torch.Tensor, jitter_px: int, event_dropout: float, gen: torch.Generator,
            integral: bool = True) -> torch.Tensor:
    """Random jitter of each frame by (dy, dx) in [-j, j]^2, j = jitter_px (zero fill, events leaving the
    frame are lost; no wrap-around), then event dropout: each of the x events of a pixel survives
    with probability 1 - event_dropout (binomial thinning; for binary frames a pixel mask).
    Non-integer frames get a per-pixel mask instead. jitter_px = 0 and event_dropout = 0 return x.
    """
    if jitter_px > 0:
        j = int(jitter_px)
        n, c, h, w = x.shape
        pad = torch.nn.functional.pad(x, (j, j, j, j))  # (N, C, H+2j, W+2j)
        off = torch.randint(0, 2 * j + 1, (n, 2), generator=gen)         # (N, 2) crop offsets
        rows = (off[:, 0, None] + torch.arange(h))[:, None, :, None]     # (N, 1, H, 1)
        cols = (off[:, 1, None] + torch.arange(w))[:, None, None, :]     # (N, 1, 1, W)
        bidx = torch.arange(n)[:, None, None, None]
        cidx = torch.arange(c)[None, :, None, None]
        x = pad[bidx, cidx, rows, cols]                                   # (N, C, H, W)
    if event_dropout > 0:
        keep = torch.full_like(x, 1.0 - event_dropout)
        if integral:
            x = torch.binomial(x.clamp_min(0), keep, generator=gen)
        else:
            x = x * torch.bernoulli(keep, generator=gen)
    return x
