"""Train the bundled reference network on phantom cohorts (CPU, seeded, patient-level labels only).

    .venv/bin/python examples/train_reference.py --cache /tmp/refdata            # everything
    .venv/bin/python examples/train_reference.py --cache /tmp/refdata --stage data  # phantoms only

Stages: ``data`` renders the training cohort (cohort seed 101) and the held-out cohort (cohort
seed 202, so every case seed is unseen in training) and samples each case's segments with the
reference spec (cached as .npz); ``train`` fits the network to the CAD-RADS 2.0 grade of each
patient (no lesion positions are used; some patients get flat 0 HU boxes, see ``add_boxes``)
and writes ``explain/model/reference.pt``; ``eval``
scores the held-out cohort and writes ``explain/model/reference-metrics.json`` (accuracy,
confusion matrix, settings), from which docs/reference-model.md quotes; ``test`` renders a
third cohort (cohort seed 303), used once for the network finally kept, and adds its scores
to the metrics file under ``"test"``; ``culprit`` traces every held-out case with lesions and
counts how often the Shapley culprit is a segment that sets the grade (``"heldout_culprit"``);
``probe`` puts one occlusion-sized 0 HU box into healthy vessels of grade-0 held-out patients
and counts how often the grade stays (``"grade0_one_box"``).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
import torch

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))  # run from a checkout

from explain.geometry import Centerline, sample_cross_sections  # noqa: E402
from explain.grading import CATEGORIES  # noqa: E402
from explain.model.reference import REFERENCE_SPEC, ReferenceNet, build_reference  # noqa: E402
from explain.phantom import iter_cohort  # noqa: E402

#: The flat box of the training cutout and of the box probe, cross-sections x pixels x pixels:
#: the occlusion window explain_case used when these weights were trained (it now gives the
#: window in mm along the arc, about 4 cross-sections on a mid-length segment). Kept as it was
#: so that the same settings give the same weights.
OCCLUSION_WINDOW = (4, 8, 8)

SETTINGS = {
    "train_cohort_seed": 101,
    "train_count": 320,
    "heldout_cohort_seed": 202,
    "heldout_count": 112,
    "test_cohort_seed": 303,
    "test_count": 56,
    "train_rotations_deg": [0.0, 45.0],
    "init_seed": 0,
    "shuffle_seed": 1,
    "epochs": 28,
    "box_probability": 1.0,
    "box_most": 8,
    "batch_patients": 4,
    "learning_rate": 3e-3,
    "weight_decay": 1e-4,
}


def sample(case, rotation_deg):
    """(S, N, H, W) float16 HU of every segment, ascending SCCT number."""
    stacks = [
        sample_cross_sections(
            case.image, Centerline(case.centerlines[sid]), points=REFERENCE_SPEC.points,
            size=REFERENCE_SPEC.size, pixel_mm=REFERENCE_SPEC.pixel_mm, rotation_deg=rotation_deg,
        ).values
        for sid in case.segment_ids
    ]
    return np.stack(stacks).astype(np.float16)


def make_data(cache, name, *, seed, count, rotations):
    path = cache / f"{name}.npz"
    if path.is_file():
        return path
    t0 = time.perf_counter()
    arrays, labels, ids = {}, [], []
    for i, case in enumerate(iter_cohort(count=count, seed=seed)):
        for r in rotations:
            arrays[f"x{i}_{int(r)}"] = sample(case, r)
        arrays[f"ids{i}"] = np.array(case.segment_ids)
        labels.append(CATEGORIES.index(case.reference["grade"]))
        ids.append(case.seed)
        if i % 20 == 0:
            print(f"{name}: {i + 1}/{count} cases, {time.perf_counter() - t0:.0f} s", flush=True)
    np.savez(path, labels=np.array(labels), seeds=np.array(ids, dtype=np.int64),
             rotations=np.array(rotations), **arrays)
    return path


def load(path):
    data = np.load(path)
    rotations = [int(r) for r in data["rotations"]]
    n = len(data["labels"])
    xs = [[torch.from_numpy(data[f"x{i}_{r}"].astype(np.float32)) for r in rotations] for i in range(n)]
    return xs, torch.as_tensor(data["labels"]), data["seeds"]


def batch_of(stacks):
    """Pad patients to the largest S by repeating their own first segment (the max is unchanged)."""
    s = max(x.shape[0] for x in stacks)
    padded = [torch.cat([x, x[:1].expand(s - x.shape[0], -1, -1, -1)]) for x in stacks]
    return torch.stack(padded)


def augment(x, gen):
    """Random quarter turns and flips of the cross-sections ``x (S, N, H, W)``."""
    k = int(torch.randint(4, (1,), generator=gen))
    x = torch.rot90(x, k, dims=(2, 3))
    if torch.rand(1, generator=gen) < 0.5:
        x = x.flip(3)
    return x


def initial_network(seed):
    """The untrained network, its weights drawn in the order the shipped weights were drawn.

    The texture channel was added to a design with one input channel: torch's seeded default
    initialisation drew every layer of that design (first convolution with one input channel),
    and then the first convolution again with two. Drawing in the same order gives the same
    initial weights as the shipped run from the same ``seed``.
    """
    c, features = 8, 32
    state = torch.random.get_rng_state()
    try:
        torch.manual_seed(seed)
        drawn = [torch.nn.Conv3d(1, c, 3, padding=1),
                 torch.nn.Conv3d(c, c, 3, stride=(1, 2, 2), padding=1),
                 torch.nn.Conv1d(2 * c + 1, 2 * c, 5), torch.nn.Conv1d(2 * c, features, 5, dilation=2),
                 torch.nn.Linear(features, 32), torch.nn.Linear(32, len(CATEGORIES)),
                 torch.nn.Conv3d(2, c, 3, padding=1)]
    finally:
        torch.random.set_rng_state(state)
    net = ReferenceNet(channels=c, features=features)
    layers = [net.features[2], net.along[0], net.along[2], net.classifier[0], net.classifier[2],
              net.features[0]]
    for layer, new in zip(layers, drawn[1:]):
        layer.load_state_dict(new.state_dict())
    return net


def add_boxes(x, gen):
    """Hide parts of ``x (S, N, H, W)`` under flat 0 HU boxes, keeping the patient's label.

    With probability ``box_probability``, 1 to ``box_most`` boxes of the occlusion window of
    ``explain_case`` (4 cross-sections x 8 x 8 pixels) filled with its 0 HU baseline, each in a
    random segment at a random place along it; half of them on the central pixels of the plane
    (the lumen), the rest anywhere in it. Cutout (DeVries & Taylor 2017) with the value that
    occlusion uses, so that the network learns a flat window means "hidden", not "blocked".
    """
    if float(torch.rand(1, generator=gen)) >= SETTINGS["box_probability"]:
        return x
    x = x.clone()
    s, n, h, w = x.shape
    bn, bh, bw = OCCLUSION_WINDOW
    for _ in range(int(torch.randint(1, SETTINGS["box_most"] + 1, (1,), generator=gen))):
        si = int(torch.randint(s, (1,), generator=gen))
        ni = int(torch.randint(n - bn + 1, (1,), generator=gen))
        if float(torch.rand(1, generator=gen)) < 0.5:
            i, j = h // 2 - bh // 2, w // 2 - bw // 2
        else:
            i = int(torch.randint(h - bh + 1, (1,), generator=gen))
            j = int(torch.randint(w - bw + 1, (1,), generator=gen))
        x[si, ni:ni + bn, i:i + bh, j:j + bw] = 0.0
    return x


def train(cache, out):
    xs, ys, _ = load(cache / "train.npz")
    torch.manual_seed(SETTINGS["init_seed"])
    net = initial_network(SETTINGS["init_seed"]).train()
    opt = torch.optim.AdamW(net.parameters(), lr=SETTINGS["learning_rate"],
                            weight_decay=SETTINGS["weight_decay"])
    gen = torch.Generator().manual_seed(SETTINGS["shuffle_seed"])
    n, bp = len(xs), SETTINGS["batch_patients"]
    steps = SETTINGS["epochs"] * ((n + bp - 1) // bp)
    sched = torch.optim.lr_scheduler.OneCycleLR(opt, max_lr=SETTINGS["learning_rate"], total_steps=steps,
                                                pct_start=0.15)
    t0 = time.perf_counter()
    for epoch in range(SETTINGS["epochs"]):
        order = torch.randperm(n, generator=gen).tolist()
        total, correct = 0.0, 0
        for start in range(0, n, bp):
            idx = order[start:start + bp]
            stacks = []
            for i in idx:
                r = int(torch.randint(len(xs[i]), (1,), generator=gen))
                stacks.append(add_boxes(augment(xs[i][r], gen), gen))
            x = batch_of(stacks)
            logits = net(x)
            loss = torch.nn.functional.cross_entropy(logits, ys[idx])
            opt.zero_grad()
            loss.backward()
            opt.step()
            sched.step()
            total += float(loss.detach()) * len(idx)
            correct += int((logits.argmax(1) == ys[idx]).sum())
        print(f"epoch {epoch + 1}: loss {total / n:.3f}, train accuracy {correct / n:.3f}, "
              f"{time.perf_counter() - t0:.0f} s", flush=True)
    net.eval()
    torch.save(net.state_dict(), out)
    return time.perf_counter() - t0


def trained(weights):
    """The reference network with the weights saved at ``weights``, in eval mode."""
    net = build_reference()
    net.load_state_dict(torch.load(weights, weights_only=True))
    return net.eval()


def evaluate(cache, weights, minutes, *, name="heldout"):
    xs, ys, seeds = load(cache / f"{name}.npz")
    net = trained(weights)
    k = len(CATEGORIES)
    confusion = np.zeros((k, k), dtype=int)
    with torch.no_grad():
        for x, y in zip(xs, ys):
            pred = int(net(x[0][None]).argmax(1))
            confusion[int(y), pred] += 1
    accuracy = float(np.trace(confusion) / confusion.sum())
    within_one = float(sum(confusion[i, j] for i in range(k) for j in range(k) if abs(i - j) <= 1)
                       / confusion.sum())
    train_seeds = set(int(s) for s in np.load(cache / "train.npz")["seeds"])
    overlap = len(train_seeds & set(int(s) for s in seeds))
    return {
        "evaluated_on": name,
        "settings": SETTINGS,
        "spec": REFERENCE_SPEC.to_dict(),
        "categories": list(CATEGORIES),
        "heldout_cases": int(confusion.sum()),
        "heldout_accuracy": accuracy,
        "heldout_within_one_category": within_one,
        "confusion_rows_true_cols_predicted": confusion.tolist(),
        "case_seed_overlap_train_heldout": overlap,
        "training_minutes": round(minutes, 1),
        "torch": torch.__version__,
    }


def box_probe(cache, weights, *, tries=10, seed=0):
    """How often one occlusion-sized 0 HU box in a grade-0 patient leaves the prediction alone.

    The box is the occlusion window of ``explain_case`` (4 cross-sections x 8 x 8 pixels, filled
    with the 0 HU baseline) on the central pixels of a random segment of a held-out grade-0
    patient, at a random place along it (numpy seed ``seed``, ``tries`` boxes per patient).
    """
    xs, ys, _ = load(cache / "heldout.npz")
    net = trained(weights)
    rng = np.random.default_rng(seed)
    bn, bh, bw = OCCLUSION_WINDOW
    i, j = REFERENCE_SPEC.size // 2 - bh // 2, REFERENCE_SPEC.size // 2 - bw // 2  # plane centre
    unchanged, total, became = 0, 0, [0] * len(CATEGORIES)
    with torch.no_grad():
        for x, y in zip(xs, ys):
            if int(y) != 0:
                continue
            x = x[0][None]
            before = int(net(x).argmax(1))
            for _ in range(tries):
                hidden = x.clone()
                s, n = int(rng.integers(x.shape[1])), int(rng.integers(x.shape[2] - bn + 1))
                hidden[0, s, n:n + bn, i:i + bh, j:j + bw] = 0.0
                after = int(net(hidden).argmax(1))
                unchanged += after == before
                became[after] += 1
                total += 1
    return {"boxes": total, "prediction_unchanged": unchanged,
            "predicted_with_box": dict(zip(CATEGORIES, became)), "seed": seed}


def culprits(cache, weights):
    """How often the Shapley culprit is a segment that sets the grade, on the held-out cohort."""
    from explain.attribution import trace_segments
    from explain.model import load_model
    from explain.phantom import make_phantom, plan_cohort
    from explain.phantom.cohort import grade_segments

    wrapped = load_model("builtin:reference", weights=weights)
    data = np.load(cache / "heldout.npz")
    per_category = {}
    for entry in plan_cohort(count=SETTINGS["heldout_count"], seed=SETTINGS["heldout_cohort_seed"]):
        if entry.category == "0":
            continue
        key = f"ids{entry.index}"
        if key in data:
            ids = [int(v) for v in data[key]]
        else:  # caches written before the ids were stored: rebuild the case to learn them
            ids = list(make_phantom(seed=entry.seed, lesions=entry.lesions).segment_ids)
        stenosis = {sid: 0.0 for sid in ids}
        for spec in entry.lesions:
            stenosis[spec.segment] = max(stenosis[spec.segment], spec.percent)
        setting = grade_segments(stenosis, entry.category, [spec.segment for spec in entry.lesions])
        x = torch.from_numpy(data[f"x{entry.index}_0"].astype(np.float32))[None]
        trace = trace_segments(wrapped, x, target="expected")
        hit = ids[trace.culprit] in setting
        per_category.setdefault(entry.category, [0, 0])
        per_category[entry.category][0] += int(hit)
        per_category[entry.category][1] += 1
    hits = sum(h for h, _ in per_category.values())
    total = sum(n for _, n in per_category.values())
    return {"cases_with_lesions": total, "culprit_sets_grade": hits,
            "culprit_sets_grade_fraction": hits / total,
            "per_category_hits_of_cases": per_category, "target": "expected"}


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cache", type=Path, required=True)
    parser.add_argument("--stage", choices=("data", "train", "eval", "test", "culprit", "probe", "all"),
                        default="all")
    parser.add_argument("--out", type=Path, default=ROOT / "explain" / "model" / "reference.pt")
    args = parser.parse_args()
    args.cache.mkdir(parents=True, exist_ok=True)
    torch.set_num_threads(max(1, torch.get_num_threads()))
    if args.stage in ("data", "all", "train"):
        make_data(args.cache, "train", seed=SETTINGS["train_cohort_seed"],
                  count=SETTINGS["train_count"], rotations=SETTINGS["train_rotations_deg"])
        make_data(args.cache, "heldout", seed=SETTINGS["heldout_cohort_seed"],
                  count=SETTINGS["heldout_count"], rotations=[0.0])
    if args.stage == "test":
        make_data(args.cache, "test", seed=SETTINGS["test_cohort_seed"],
                  count=SETTINGS["test_count"], rotations=[0.0])
    minutes = 0.0
    if args.stage in ("train", "all"):
        minutes = train(args.cache, args.out) / 60.0
    if args.stage in ("eval", "all", "train"):
        metrics = evaluate(args.cache, args.out, minutes)
        path = args.out.with_name("reference-metrics.json")
        path.write_text(json.dumps(metrics, indent=1) + "\n", encoding="utf-8")
        print(json.dumps({k: metrics[k] for k in ("heldout_accuracy", "heldout_within_one_category")}))
        print(np.array(metrics["confusion_rows_true_cols_predicted"]))
    extra = {"culprit": ("heldout_culprit", culprits), "probe": ("grade0_one_box", box_probe)}
    if args.stage in extra:
        key, measure = extra[args.stage]
        path = args.out.with_name("reference-metrics.json")
        metrics = json.loads(path.read_text(encoding="utf-8"))
        metrics[key] = measure(args.cache, args.out)
        path.write_text(json.dumps(metrics, indent=1) + "\n", encoding="utf-8")
        print(json.dumps(metrics[key]))
    if args.stage == "test":
        path = args.out.with_name("reference-metrics.json")
        metrics = json.loads(path.read_text(encoding="utf-8"))
        metrics["test"] = evaluate(args.cache, args.out, 0.0, name="test")
        for key in ("settings", "spec", "categories", "torch", "training_minutes"):
            metrics["test"].pop(key)
        for key in ("cases", "accuracy", "within_one_category"):
            metrics["test"][f"test_{key}"] = metrics["test"].pop(f"heldout_{key}")
        path.write_text(json.dumps(metrics, indent=1) + "\n", encoding="utf-8")
        print(json.dumps({k: metrics["test"][k] for k in ("test_accuracy", "test_within_one_category")}))
        print(np.array(metrics["test"]["confusion_rows_true_cols_predicted"]))


if __name__ == "__main__":
    main()
