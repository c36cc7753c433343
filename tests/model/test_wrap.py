"""Wrapping: the split at the segment max reproduces the whole model; clear errors otherwise."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest
import torch

from explain.errors import InputError, ModelError
from explain.model import CrossSectionSpec, wrap_model

_spec = importlib.util.spec_from_file_location("tm", Path(__file__).with_name("models.py"))
tm = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(tm)


def _x(b=1, s=3, n=4, h=6, w=6, seed=0):
    g = torch.Generator().manual_seed(seed)
    return torch.randn(b, s, n, h, w, generator=g) * 200.0


@pytest.mark.parametrize(
    "how", ["max", "amax", "tensor_max_keepdim", "max_pool1d", "adaptive_module"]
)
def test_plain_split_reproduces_forward(how):
    net = tm.PlainConv(how)
    w = wrap_model(net)
    x = _x(b=2)
    feats = w.encode(x)
    assert w.kind == "plain" and feats.shape == (2, 3, 3)
    # the protocol twin computes the same features: the split found the right place
    torch.testing.assert_close(feats, net.inner.encode_segments(x))
    out = w.head(feats.max(dim=1).values)
    ref = net(x)
    assert set(out) == {"grade", "score"}
    for k in ref:
        torch.testing.assert_close(out[k], ref[k])


def test_plain_head_is_differentiable_in_pooled():
    w = wrap_model(tm.PlainConv("amax"))
    x = _x()
    pooled = w.encode(x).max(dim=1).values.detach().requires_grad_()
    w.head(pooled)["score"].sum().backward()
    torch.testing.assert_close(pooled.grad, torch.ones_like(pooled))


def test_protocol_model():
    net = tm.SmallConv()
    w = wrap_model(net, spec={"points": 4, "size": 6, "pixel_mm": 0.5}, name="small")
    x = _x()
    assert w.kind == "protocol" and w.name == "small"
    torch.testing.assert_close(w.forward(x), net(x))
    with pytest.raises(InputError, match=r"expects \(4, 6, 6\)"):
        w.encode(torch.zeros(1, 2, 5, 6, 6))


def test_channel_axis_of_size_s_is_not_taken_for_the_segment_axis():
    w = wrap_model(tm.ChannelsEqualS())
    x = _x(s=3)
    torch.testing.assert_close(w.encode(x), x.mean(dim=(3, 4))[..., :3])


@pytest.mark.parametrize(
    "net, match",
    [(tm.NoMax(), "no maximum over the segment axis"), (tm.TwoMaxes(), "2 maxima"),
     (tm.Mixing(), "mixes segments")],
)
def test_unwrappable_models_get_a_clear_error(net, match):
    w = wrap_model(net)
    with pytest.raises(ModelError, match=match) as err:
        w.encode(_x())
    assert "encode_segments" in str(err.value)


def test_ties_lowest_segment_wins_as_torch_max_does():
    # torch.max(dim) documents returning the index of a maximal value; on CPU it is the first
    # (checked here because the tracing step relies on it)
    feats = torch.tensor([[[1.0, 2.0], [1.0, 2.0], [0.0, 2.0]]])
    assert torch.max(feats, dim=1).indices.tolist() == [[0, 0]]


def test_weights_hash_follows_weights():
    a, b = wrap_model(tm.SmallConv(seed=0)), wrap_model(tm.SmallConv(seed=1))
    assert a.weights_hash != b.weights_hash and len(a.weights_hash) == 12
    assert a.weights_hash == wrap_model(tm.SmallConv(seed=0)).weights_hash


def test_spec_validation():
    with pytest.raises(InputError, match="pixel_mm"):
        CrossSectionSpec(points=4, size=6, pixel_mm=0)
    with pytest.raises(InputError, match="points"):
        CrossSectionSpec(points=2.5, size=6, pixel_mm=0.5)



def test_a_lone_head_is_not_the_protocol_and_is_noted():
    # issue decision: only encode_segments and head together make the protocol
    half = wrap_model(type("Half", (torch.nn.Module,), {"head": lambda self, p: p})())
    assert half.kind == "plain"
    assert any("head is a method but there is no encode_segments" in n for n in half.notes)


def test_malformed_module_spec_is_an_error_not_ignored():
    net = tm.SmallConv()
    net.cross_section_spec = (4, 6, 0.5)
    with pytest.raises(ModelError, match=r"cross_section_spec: expected a CrossSectionSpec"):
        wrap_model(net)
    net.cross_section_spec = {"points": 4, "size": 6}
    with pytest.raises(InputError, match="missing field"):
        wrap_model(net)
    # an explicit spec wins and the attribute is not consulted
    assert wrap_model(net, spec=CrossSectionSpec(4, 6, 0.5)).spec.points == 4


class _Noisy(torch.nn.Module):
    """Protocol model whose head adds noise: not repeatable."""

    def encode_segments(self, x):
        return x.mean(dim=(2, 3, 4))[..., None]

    def head(self, pooled):
        return pooled + torch.rand_like(pooled)


class _MixingProtocol(_Noisy):
    def encode_segments(self, x):
        f = x.mean(dim=(2, 3, 4))[..., None]
        return f - f.mean(dim=1, keepdim=True)

    def head(self, pooled):
        return pooled


def test_protocol_path_gets_the_independence_and_repeatability_checks():
    with pytest.raises(ModelError, match="mixes segments"):
        wrap_model(_MixingProtocol()).encode(_x())
    with pytest.raises(ModelError, match="two identical head passes") as err:
        wrap_model(_Noisy()).encode(_x())
    assert "mixes" not in str(err.value)


def test_one_segment_still_reveals_mixing():
    # with S = 1 the added segment is the first one mirrored at half its HU, so it differs
    with pytest.raises(ModelError, match="mixes segments"):
        wrap_model(_MixingProtocol()).encode(_x(s=1))


def test_plain_model_with_dropout_forced_on_is_refused_as_unrepeatable():
    torch.manual_seed(0)
    class Mc(torch.nn.Module):
        def forward(self, x):
            f = x.mean(dim=(3, 4))  # (B, S, N): N features per segment
            return torch.nn.functional.dropout(f, 0.5, training=True).amax(dim=1)

    with pytest.raises(ModelError, match="two identical encoder passes") as err:
        wrap_model(Mc()).forward(_x(s=4, n=8) + 500.0)  # 32 features: a repeat by chance ~2^-32
    assert "mixes" not in str(err.value)


def test_float64_model_input_is_cast_and_noted():
    net = tm.SmallConv().double()
    w = wrap_model(net)
    x = _x()
    assert w.dtype == torch.float64 and any("float64" in n for n in w.notes)
    out = w.forward(x)
    assert out.dtype == torch.float64
    torch.testing.assert_close(out, net(x.double()))


def test_train_mode_is_switched_off_and_noted():
    net = tm.SmallConv().train()
    w = wrap_model(net)
    assert not net.training and any("eval()" in n for n in w.notes)
    assert not any("train mode" in n for n in wrap_model(tm.SmallConv().eval()).notes)


def test_mixed_float_dtypes_are_refused():
    net = tm.SmallConv()
    net.fc.double()
    with pytest.raises(ModelError, match="several float dtypes"):
        wrap_model(net)


def test_tuple_output_split_reproduces_forward():
    class Two(torch.nn.Module):
        def forward(self, x):
            p = x.mean(dim=(2, 3, 4))[..., None].amax(dim=1)
            return p * 2.0, [p + 1.0]

    w = wrap_model(Two())
    x = _x(b=2)
    out = w.head(w.encode(x).max(dim=1).values)
    torch.testing.assert_close(out[0], w.forward(x)[0])
    torch.testing.assert_close(out[1][0], w.forward(x)[1][0])


def test_head_that_cannot_broadcast_is_replayed_per_patient_with_a_note():
    class UsesBatch(torch.nn.Module):
        def forward(self, x):
            p = x.mean(dim=(2, 3, 4))[..., None].amax(dim=1)    # (B, 1)
            return torch.cat([p, -p], dim=1).reshape(x.shape[0], -1)  # needs the real batch

    w = wrap_model(UsesBatch())
    x = _x(b=2)
    out = w.head(w.encode(x).max(dim=1).values)
    torch.testing.assert_close(out, UsesBatch()(x))
    assert any(n.startswith("head replay: one dummy stack could not stand for 2 patients")
               for n in w.notes)
