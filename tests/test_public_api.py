"""The public API is explicit, sorted and importable."""

import sweeper


def test_all_is_sorted_and_complete() -> None:
    assert sweeper.__all__ == sorted(sweeper.__all__)
    for name in sweeper.__all__:
        assert hasattr(sweeper, name), name
    public = {name for name in vars(sweeper) if not name.startswith("_")}  # lazy ones loaded above
    modules = {name for name in public if type(getattr(sweeper, name)).__name__ == "module"}
    assert public - modules == set(sweeper.__all__)
