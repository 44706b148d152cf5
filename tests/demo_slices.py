"""Small treebank files cut from the committed demo treebank, for tests that run the trainer."""

from pathlib import Path

DEMO = Path(__file__).resolve().parents[1] / "data_demo"


def demo_lines(split: str = "train") -> list[str]:
    return (DEMO / f"garden_{split}.trees").read_text(encoding="utf-8").splitlines()


def write_demo_slices(directory: Path, n_train: int, n_dev: int = 0, dev_split: str = "train") -> tuple[Path, Path]:
    """directory/train.trees: the first ``n_train`` training trees; directory/dev.trees: the next
    ``n_dev`` training trees (``dev_split="train"``) or the first ``n_dev`` of another split."""
    train_lines = demo_lines("train")
    dev_lines = train_lines[n_train : n_train + n_dev] if dev_split == "train" else demo_lines(dev_split)[:n_dev]
    train, dev = directory / "train.trees", directory / "dev.trees"
    train.write_text("\n".join(train_lines[:n_train]) + "\n", encoding="utf-8")
    if n_dev:
        dev.write_text("\n".join(dev_lines) + "\n", encoding="utf-8")
    return train, dev
