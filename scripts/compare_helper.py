"""The NumPy side of scripts/compare-builds.sh and scripts/compare-speed.sh.

  inputs CONFIG OUT.npy --seed S   fixed inputs for a model: stack float32 rows [N, in],
                                   transformer int32 tokens [B, T]
  explain A B                      how two files that cmp found different differ (.npy values,
                                   .npz arrays, or bytes)
  speed ROUNDS_DIR                 the table of compare-speed.sh from its per-round files

Run with /usr/bin/python3 (Debian python3-numpy).
"""
import argparse
import json
import math
import os
import re
import statistics
import sys
import zipfile

import numpy as np

# Stack inputs: more rows than the default --batch of 64, so `sprig run` makes full and partial
# calls; the first row is zero (every node logit is its bias) and a few rows are large, so that
# activations saturate and i8 scales see extremes.
STACK_ROWS = 150
LARGE_ROWS = 4
LARGE_SCALE = 30.0
# Transformer inputs: several sequences, each as long as the model takes up to this length.
SEQUENCES = 5
MAX_LENGTH = 48


def make_inputs(config_path, out_path, seed):
    with open(config_path) as f:
        config = json.load(f)
    rng = np.random.default_rng(seed)
    if config['family'] == 'stack':
        x = rng.standard_normal((STACK_ROWS, config['input_dim'])).astype(np.float32)
        x[0] = 0
        x[1:1 + LARGE_ROWS] *= np.float32(LARGE_SCALE)
        np.save(out_path, x)
        return
    vocab = config['vocab_size']
    length = min(config['max_seq'], MAX_LENGTH)
    tokens = rng.integers(0, vocab, size=(SEQUENCES, length), dtype=np.int32)
    # The ends of the vocabulary, which an off-by-one in the embedding or head would miss.
    tokens[0, 0] = 0
    tokens[-1, -1] = vocab - 1
    np.save(out_path, tokens)


# Arrays described per differing file; the rest are counted.
MAX_PHRASES = 3


def first_byte_difference(a, b):
    for i, (x, y) in enumerate(zip(a, b)):
        if x != y:
            return i
    return min(len(a), len(b))


def describe_arrays(name, x, y):
    """One phrase for two arrays that should be bit-identical, or None when they are."""
    if x.dtype != y.dtype or x.shape != y.shape:
        return '%s: %s%s against %s%s' % (name, x.dtype, list(x.shape), y.dtype, list(y.shape))
    if x.tobytes() == y.tobytes():
        return None
    if x.dtype.kind == 'f':
        differ = x.view('u%d' % x.itemsize) != y.view('u%d' % y.itemsize)
        with np.errstate(invalid='ignore'):
            delta = np.abs(x.astype(np.float64) - y.astype(np.float64))
        largest = float(np.nanmax(delta)) if np.any(np.isfinite(delta)) else float('nan')
        return '%s: %d of %d values differ, max abs %.3g' % (name, int(differ.sum()), x.size,
                                                             largest)
    differ = x != y
    first = np.argwhere(differ)[0].tolist()
    return '%s: %d of %d values differ, first at %s (%s against %s)' % (
        name, int(differ.sum()), x.size, first, x[tuple(first)], y[tuple(first)])


def explain(a_path, b_path):
    a_bytes = open(a_path, 'rb').read()
    b_bytes = open(b_path, 'rb').read()
    phrases = []
    try:
        if a_path.endswith('.npy'):
            phrases.append(describe_arrays(os.path.basename(a_path), np.load(a_path),
                                           np.load(b_path)))
        elif a_path.endswith('.npz'):
            with np.load(a_path) as a, np.load(b_path) as b:
                if sorted(a.files) != sorted(b.files):
                    phrases.append('arrays %s against %s' % (sorted(a.files), sorted(b.files)))
                for name in sorted(set(a.files) & set(b.files)):
                    phrases.append(describe_arrays(name, a[name], b[name]))
    except (ValueError, OSError, zipfile.BadZipFile) as e:
        phrases.append('unreadable: %s' % e)
    phrases = [p for p in phrases if p]
    if len(phrases) > MAX_PHRASES:
        phrases = phrases[:MAX_PHRASES] + ['and %d more arrays' % (len(phrases) - MAX_PHRASES)]
    if not phrases:
        # Same values in different bytes: the file framing itself differs.
        phrases.append('%d against %d bytes, first difference at byte %d' %
                       (len(a_bytes), len(b_bytes), first_byte_difference(a_bytes, b_bytes)))
    print('; '.join(phrases))


# ---- speed ----

# A storage-type line of sprig_bench_layers: layer, input, type, cpu_us/row, x_f32, bytes/row.
STORAGE_LINE = re.compile(r'^(\S+)\s+(cold|warm)\s+(f32|f16|bf16|i8)\s+([0-9.]+)\s+[0-9.]+x\s+')
KERNELS = re.compile(r'kernels (\w+)')


def layer_figures(json_path, text_path):
    """Figures of one sprig_bench_layers run: name -> (value, unit); and its kernel path."""
    figures = {}
    kernels = set()
    if os.path.exists(json_path):
        with open(json_path) as f:
            for b in json.load(f).get('benchmarks', []):
                if b.get('run_type', 'iteration') != 'iteration' or 'us_per_row' not in b:
                    continue
                # us_per_row comes from the CPU time, which leaves out the time other
                # processes hold the core; the wall time per call shows what they cost.
                figures['%s cpu/row' % b['name']] = (b['us_per_row'], 'us')
                figures['%s wall/call' % b['name']] = (b['real_time'], b['time_unit'])
    with open(text_path) as f:
        for line in f:
            kernels.update(KERNELS.findall(line))
            m = STORAGE_LINE.match(line)
            if m:
                figures['storage/%s %s %s cpu/row' % m.group(1, 2, 3)] = (float(m.group(4)), 'us')
    return figures, kernels


def bench_figures(json_path):
    """Figures of one `sprig bench --json` run on the model (not its dense twin)."""
    with open(json_path) as f:
        report = json.load(f)
    figures = {}
    for p in report['results']:
        label = 'bench %s, calls of %s token%s' % (p['phase'], p['batch'],
                                                   '' if p['batch'] == 1 else 's')
        if p['threads'] != 1:
            label += ', %s threads' % p['threads']
        side = p['model']
        figures[label + ', latency'] = (side['latency_ms']['median'], 'ms')
        figures[label + ', tokens/s'] = (side['per_second']['median'], '/s')
        figures[label + ', cpu tokens/s'] = (side['cpu_per_second']['median'], '/s')
    return figures, {report.get('kernels', '?')}


def speed_table(rounds_dir):
    per_side = {'old': {}, 'new': {}}  # side -> figure -> [value per round]
    units = {}
    kernels = {'old': set(), 'new': set()}
    order = []
    names = sorted(os.listdir(rounds_dir))
    for name in names:
        m = re.match(r'^(old|new)\.(\d+)\.(layers\.txt|bench\.json)$', name)
        if not m:
            continue
        side, round_index, kind = m.group(1), m.group(2), m.group(3)
        path = os.path.join(rounds_dir, name)
        if kind == 'layers.txt':
            figures, k = layer_figures(
                os.path.join(rounds_dir, '%s.%s.layers.json' % (side, round_index)), path)
        else:
            figures, k = bench_figures(path)
        kernels[side] |= k
        for figure, (value, unit) in figures.items():
            if figure not in units:
                order.append(figure)
            units[figure] = unit
            per_side[side].setdefault(figure, {})[round_index] = value

    print('kernel path: old %s, new %s' % (','.join(sorted(kernels['old'])) or '?',
                                           ','.join(sorted(kernels['new'])) or '?'))
    print('%-52s %5s %12s %12s %8s %8s %7s' % ('figure', 'unit', 'old median', 'new median',
                                              'new/old', 'paired', 'rounds'))
    for figure in order:
        old = per_side['old'].get(figure, {})
        new = per_side['new'].get(figure, {})
        if not old or not new:
            print('%-52s only in %s' % (figure, 'old' if old else 'new'))
            continue
        old_median = statistics.median(old.values())
        new_median = statistics.median(new.values())
        ratio = new_median / old_median if old_median else math.nan
        # The median of the per-round ratios: each round ran old and new back to back, so its
        # ratio cancels load that changed between rounds.
        both = sorted(set(old) & set(new))
        paired = statistics.median(new[r] / old[r] for r in both if old[r]) if both else math.nan
        print('%-52s %5s %12.4g %12.4g %8.3f %8.3f %7d' % (figure, units[figure], old_median,
                                                          new_median, ratio, paired, len(both)))
    print('new/old: the ratio of the medians; paired: the median of the per-round ratios. '
          'For times below 1 means new is faster; for rates (/s) above 1 does.')


def main():
    parser = argparse.ArgumentParser(description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = parser.add_subparsers(dest='command', required=True)
    p = sub.add_parser('inputs')
    p.add_argument('config')
    p.add_argument('out')
    p.add_argument('--seed', type=int, required=True)
    p = sub.add_parser('explain')
    p.add_argument('a')
    p.add_argument('b')
    p = sub.add_parser('speed')
    p.add_argument('rounds_dir')
    args = parser.parse_args()
    if args.command == 'inputs':
        make_inputs(args.config, args.out, args.seed)
    elif args.command == 'explain':
        explain(args.a, args.b)
    else:
        speed_table(args.rounds_dir)


if __name__ == '__main__':
    sys.exit(main())
