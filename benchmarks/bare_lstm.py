"""The bare side of benchmarks/overhead.py: the same trials in plain PyTorch, no sweeper code.

    python benchmarks/bare_lstm.py CONFIG.json

CONFIG (written by overhead.py) names the task's tensors, the training settings and each
trial's unroll, width and seeds. The loop is what one would write by hand: an LSTM and a
linear head, truncated BPTT with the state carried and detached at each window, global-norm
clipping, Adam, evaluation after every epoch. It writes the final validation losses, which
must equal sweeper's (the weights are created in the trainer's order from the same seed and
the shuffles come from the same seeds), and when the first trial began and the last one
ended, so that overhead.py can split the run into phases.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import torch


def main(config_path: str) -> None:
    config = json.loads(Path(config_path).read_text())
    torch.set_num_threads(config["threads"])
    data = torch.load(config["data"])
    began = time.time()
    losses = [run_trial(data, config, trial) for trial in config["trials"]]
    ended = time.time()
    Path(config["out"]).write_text(json.dumps({"losses": losses, "began": began, "ended": ended}))


def run_trial(data: dict, config: dict, trial: dict) -> float:
    train_x, train_y, train_w = data["train"]
    torch.manual_seed(trial["seed"])
    # parameters are created in the trainer's order (recurrent layer, then head): same weights
    rnn = torch.nn.LSTM(train_x.shape[-1], trial["hidden"], batch_first=True)
    head = torch.nn.Linear(trial["hidden"], train_y.shape[-1])
    params = [*rnn.parameters(), *head.parameters()]
    optimizer = torch.optim.Adam(params, lr=config["lr"])
    shuffle = torch.Generator().manual_seed(trial["shuffle_seed"])
    loss = float("nan")
    for _ in range(config["epochs"]):
        order = torch.randperm(len(train_x), generator=shuffle)
        x, y, w = train_x[order], train_y[order], train_w[order]
        for start in range(0, len(x), config["batch"]):
            rows = slice(start, start + config["batch"])
            train_batch(rnn, head, optimizer, x[rows], y[rows], w[rows], trial, config)
        loss = evaluate(rnn, head, *data["valid"])
    return loss


def train_batch(rnn, head, optimizer, x, y, w, trial: dict, config: dict) -> None:
    params = [*rnn.parameters(), *head.parameters()]
    h = torch.zeros(1, len(x), trial["hidden"])
    state = (h, torch.zeros_like(h))
    for start in range(0, x.shape[1], trial["unroll"]):
        stop = start + trial["unroll"]
        state = (state[0].detach(), state[1].detach())
        weights = w[:, start:stop]
        if weights.sum() == 0:  # no target in this window: only carry the state
            with torch.no_grad():
                _, state = rnn(x[:, start:stop], state)
            continue
        features, state = rnn(x[:, start:stop], state)
        losses = (head(features) - y[:, start:stop]).square().mean(dim=-1)
        loss = (losses * weights).sum() / weights.sum()
        optimizer.zero_grad(set_to_none=True)
        loss.backward()
        norm = torch.nn.utils.clip_grad_norm_(params, config["clip"])
        if torch.isfinite(loss) and torch.isfinite(norm):
            optimizer.step()


def evaluate(rnn, head, x, y, w) -> float:
    with torch.no_grad():
        h = torch.zeros(1, len(x), rnn.hidden_size)
        features, _ = rnn(x, (h, torch.zeros_like(h)))
        losses = (head(features) - y).square().mean(dim=-1).double()
        return float((losses * w.double()).sum() / w.double().sum())


if __name__ == "__main__":
    main(sys.argv[1])
