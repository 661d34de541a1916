"""Pictures written from figures (analysis.figures.picture_bytes)."""

import pytest

from analysis.figures import picture_bytes


def test_picture_bytes_tries_again_once_then_raises():
    class Flaky:
        def __init__(self, failures):
            self.failures = failures
            self.calls = 0

        def to_image(self, format):
            self.calls += 1
            if self.calls <= self.failures:
                raise RuntimeError("page not ready")
            return f"<{format}>".encode()

    once = Flaky(1)
    assert picture_bytes(once, "svg") == b"<svg>" and once.calls == 2
    always = Flaky(5)
    with pytest.raises(RuntimeError, match="page not ready"):
        picture_bytes(always, "pdf")
    assert always.calls == 2
