"""Character-level text: sequences, vocabulary, the unigram baseline and file errors."""

import math
from pathlib import Path

import pytest
import torch

from sweeper.errors import SpecError
from sweeper.tasks.registry import build_task
from sweeper.tasks.text import unigram_entropy


def text_task(folder: Path, content: str, **options):
    (folder / "corpus.txt").write_text(content, encoding="utf-8")
    return build_task({"kind": "text", "file": "corpus.txt", **options}, folder, "t.toml")


def test_unigram_entropy_equals_hand_computation(tmp_path):
    train = ("abcabcdd" * 10)[:80]
    valid = "x" + "a" * 9 + "b" * 6 + "c" * 3 + "z"  # 20 characters
    task = text_task(tmp_path, train + valid, length=6, valid_fraction=0.2)
    # valid holds 19 // 6 = 3 sequences whose targets are the 18 characters after the "x":
    # 9 a, 6 b, 3 c
    by_hand = -(0.5 * math.log(0.5) + (1 / 3) * math.log(1 / 3) + (1 / 6) * math.log(1 / 6))
    baseline = task.baseline()
    assert baseline.value == pytest.approx(by_hand)
    assert baseline.measure == "valid_loss"
    assert f"{by_hand:.4f} nats per character" in baseline.description


def test_sequences_predict_the_next_character(tmp_path):
    content = "".join(chr(ord("a") + (i * 7) % 13) for i in range(400))
    task = text_task(tmp_path, content, length=16)
    data = task.data("train")
    inputs = data.inputs.argmax(dim=-1)
    assert torch.equal(inputs[:, 1:], data.targets[:, :-1])
    assert torch.equal(inputs[1:, 0], data.targets[:-1, -1])  # sequences follow each other
    decoded = "".join(task.vocabulary[i] for i in inputs.flatten())
    assert decoded == content[: len(decoded)]
    assert len(data) == (360 - 1) // 16


def test_vocabulary_covers_the_whole_file(tmp_path):
    task = text_task(tmp_path, "ab" * 45 + "abcdéf€ab", length=4, valid_fraction=0.1)
    assert task.vocabulary == "abcdfé€"  # c, d, é, f, € occur only in validation
    assert task.input_size == task.output_size == 7


def test_metric_is_nats_per_character(tmp_path):
    task = text_task(tmp_path, "abcdefgh" * 30, length=10)
    assert task.metric_name == "nats_per_character"
    data = task.data("valid")
    uniform = torch.zeros(len(data), 10, 8)
    assert task.metric(uniform, data) == pytest.approx(math.log(8))  # 8 equally likely symbols
    sure = torch.nn.functional.one_hot(data.targets, 8).float() * 50
    assert task.metric(sure, data) < 1e-6


def test_non_utf8_file_is_refused(tmp_path):
    (tmp_path / "corpus.txt").write_bytes("café au lait ".encode("latin-1") * 20)
    with pytest.raises(SpecError) as caught:
        build_task({"kind": "text", "file": "corpus.txt"}, tmp_path, "t.toml")
    assert caught.value.key == "task.file"
    assert "not UTF-8" in caught.value.message
    assert "0xe9 at offset 3" in caught.value.message


def test_missing_file_and_too_short_text(tmp_path):
    with pytest.raises(SpecError) as caught:
        build_task({"kind": "text", "file": "nowhere.txt"}, tmp_path, "t.toml")
    assert caught.value.key == "task.file"
    with pytest.raises(SpecError) as caught:
        text_task(tmp_path, "short text " * 10, length=100)
    assert caught.value.key == "task.length"
    assert "fewer than length + 1 = 101" in caught.value.message


def test_test_fraction_holds_out_the_tail_in_file_order(tmp_path):
    content = "".join(chr(ord("a") + (i * 5) % 11) for i in range(1000))
    task = text_task(tmp_path, content, length=9, valid_fraction=0.2, test_fraction=0.1)
    assert task.splits == ("train", "valid", "test")
    # 1000 characters: the first 700 train, the next 200 validate, the last 100 are held out
    assert (task.texts["train"], task.texts["valid"], task.texts["test"]) == (
        content[:700],
        content[700:900],
        content[900:],
    )
    held_out = task.data("test")
    assert len(held_out) == (100 - 1) // 9
    decoded = "".join(task.vocabulary[i] for i in held_out.inputs.argmax(dim=-1).flatten())
    assert decoded == content[900 : 900 + len(decoded)]
    # the held-out baseline is the unigram entropy of the tail's own scored characters
    tail = task.baseline_on("test")
    assert tail.value == pytest.approx(unigram_entropy(content[901 : 901 + 11 * 9]))
    assert "nats per character of the test text" in tail.description
    assert text_task(tmp_path, content, length=9).splits == ("train", "valid")


def test_test_fraction_that_leaves_no_training_text_is_refused(tmp_path):
    with pytest.raises(SpecError) as caught:
        text_task(tmp_path, "abc" * 100, length=5, valid_fraction=0.5, test_fraction=0.5)
    assert caught.value.key == "task.test_fraction"
    assert "leaves no training rows" in caught.value.message
