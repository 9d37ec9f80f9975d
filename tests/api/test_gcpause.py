"""The collector pause nests and always restores the collector's state."""

from __future__ import annotations

import gc

import pytest

from service.api.gcpause import paused_gc


def test_nested_pauses_restore_the_collector():
    assert gc.isenabled()
    with paused_gc():
        assert not gc.isenabled()
        with paused_gc():
            assert not gc.isenabled()
        assert not gc.isenabled()
    assert gc.isenabled()


def test_an_error_inside_still_restores_it():
    with pytest.raises(ValueError), paused_gc():
        raise ValueError("boom")
    assert gc.isenabled()


def test_a_collector_already_off_stays_off():
    gc.disable()
    try:
        with paused_gc():
            pass
        assert not gc.isenabled()
    finally:
        gc.enable()
