#!/usr/bin/env python3
"""Measures simulated photos of random setups against the simulator's truth.

    scripts/sweep.py [--seed S] [--count N] [--dir D] BINARY [BINARY2]
    scripts/sweep.py --benches [--seed S] [--count N] [--dir D] BINARY [BINARY2]

Draws N setups (lamp, frame size, grating, roll, blur, exposure, background,
JPEG quality, lens distortion; seeded, so a run is repeatable), renders each
with `BINARY simulate` into D (kept between runs: a second binary measures
the same photos), measures it with `measure --json`, and prints for each
binary: how many photos had their lamp recognised, how many of the in-frame
first-order lines were found (within 1.5 px across the line), the RMS of
their distance from the truth, and how many lines were listed in all (the
rest are extra). With two binaries it also lists the photos whose lamp or
count of lines found differs. Used to find the faults the fixed tests do
not reach; see DEVELOPERS.md.

With --benches it draws N setups and renders for each a bench of one setup
(a mercury photo of peak 0.5-1.2 and three hydrogen photos, about half of
them dim), runs `batch` over them, and prints how many benches got a
Rydberg constant, how many within 3σ of R_H, and how many hydrogen photos
were read as hydrogen.
"""
import argparse
import concurrent.futures
import json
import math
import os
import random
import subprocess


def setups(seed, count):
    rng = random.Random(seed)
    out = []
    for _ in range(count):
        out.append(dict(
            lamp=rng.choice(['mercury', 'mercury', 'hydrogen', 'hydrogen', 'helium', 'cfl']),
            size=rng.choice(['640x480', '1280x720', '1920x1080', '1920x1080', '3264x2448']),
            lpm=rng.choice([300, 600, 600, 1000]),
            tilt=round(rng.uniform(-10, 10), 2),
            psf=round(rng.uniform(0.7, 3.0), 2),
            peak=round(rng.choice([rng.uniform(0.05, 0.3), rng.uniform(0.3, 1.0), rng.uniform(1.0, 1.5)]), 3),
            bg=round(rng.uniform(0.002, 0.08), 4),
            q=rng.choice([60, 70, 75, 80, 85, 90, 95, 98]),
            dist=rng.choice([0, 0, 0, round(rng.uniform(-0.15, 0.05), 3)]),
            seed=rng.randrange(1, 10**6)))
    return out


def render(binary, d, k, p):
    photo = os.path.join(d, f'c{k:03d}.jpg')
    if not os.path.exists(photo):
        subprocess.run([binary, 'simulate', '-o', photo, '--lamp', p['lamp'], '--size', p['size'],
                        '--lines-per-mm', str(p['lpm']), '--tilt', str(p['tilt']), '--psf', str(p['psf']),
                        '--peak', str(p['peak']), '--background', str(p['bg']), '--quality', str(p['q']),
                        '--distortion', str(p['dist']), '--seed', str(p['seed'])], check=True, capture_output=True)
    return photo


def score(binary, photo):
    r = subprocess.run([binary, 'measure', '--json', photo], capture_output=True, text=True)
    truth = json.load(open(photo[:-4] + '.truth.json'))
    tl = [l for l in truth['lines'] if l['in_frame'] and l.get('order', 1) == 1]
    res = dict(lamp=False, found=0, n=len(tl), d=[], listed=0, error='')
    if not r.stdout:
        res['error'] = r.stderr.strip()[:200]
        return res
    im = json.loads(r.stdout)['images'][0]
    lines = im.get('lines') or []
    res['lamp'], res['listed'] = im.get('lamp') == truth['lamp'], len(lines)
    for t in tl:
        best = None
        for l in lines:
            if abs(l['y'] - t['y']) > 200:
                continue
            across = abs((l['x'] - t['x']) * t['dir'][1] - (l['y'] - t['y']) * t['dir'][0])
            best = across if best is None else min(best, across)
        if best is not None and best <= 1.5:
            res['found'] += 1
            res['d'].append(best)
    return res


def render_bench(binary, d, k, p, rng):
    """Renders bench k of setup p into d/sKK: hg.jpg and h0-h2.jpg."""
    b = os.path.join(d, 'in', f's{k:02d}')
    os.makedirs(b, exist_ok=True)
    common = ['--size', p['size'], '--lines-per-mm', str(p['lpm']), '--tilt', str(p['tilt']), '--psf', str(p['psf']),
              '--background', str(p['bg']), '--quality', str(p['q']), '--distortion', str(p['dist'])]
    shots = [('hg.jpg', 'mercury', round(rng.uniform(0.5, 1.2), 3))]
    shots += [(f'h{i}.jpg', 'hydrogen', round(rng.choice([rng.uniform(0.1, 0.3), rng.uniform(0.3, 1.0)]), 3)) for i in range(3)]
    jobs = []
    for j, (name, lamp, peak) in enumerate(shots):
        jobs.append((os.path.join(b, name), lamp, peak, 1000 * k + j + 1))
    return jobs, common


def benches(a, d):
    rng = random.Random(a.seed)
    jobs = []
    for k, p in enumerate(setups(a.seed, a.count)):
        js, common = render_bench(a.binary[0], d, k, p, rng)
        jobs += [(j, common) for j in js]

    def one(jc):
        (f, lamp, peak, seed), common = jc
        if not os.path.exists(f):
            subprocess.run([a.binary[0], 'simulate', '-o', f, '--lamp', lamp, '--peak', str(peak), '--seed', str(seed)] + common,
                           check=True, capture_output=True)
            os.remove(f[:-4] + '.truth.json')
    with concurrent.futures.ThreadPoolExecutor(os.cpu_count() or 2) as ex:
        list(ex.map(one, jobs))
    for k, b in enumerate(a.binary):
        out = os.path.join(d, f'out{k}')
        subprocess.run([b, 'batch', '--quiet', '--out', out, os.path.join(d, 'in')], capture_output=True)
        doc = json.load(open(os.path.join(out, 'results.json')))
        with_r = good = hyd = tot = 0
        for be in doc['benches']:
            ry = be.get('rydberg')
            with_r += ry is not None
            good += ry is not None and abs(ry['deviation_sigma']) < 3
            for ph in (be.get('photos') or []) + (be.get('calibration_photos') or []):
                if os.path.basename(ph['file']).startswith('h'):
                    tot += 1
                    hyd += ph.get('lamp') == 'hydrogen'
        print(f"{b}: benches {len(doc['benches'])}, with R {with_r}, R within 3σ of R_H {good}, "
              f"hydrogen photos read as hydrogen {hyd} of {tot}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument('--seed', type=int, default=12)
    ap.add_argument('--count', type=int, default=120)
    ap.add_argument('--dir', default=None, help='where the photos go (default: a folder per seed in the temp folder)')
    ap.add_argument('--benches', action='store_true', help='benches of one setup each, through batch (see above)')
    ap.add_argument('binary', nargs='+')
    a = ap.parse_args()
    kind = 'benches' if a.benches else 'sweep'
    d = a.dir or os.path.join(os.environ.get('TMPDIR', '/tmp'), f'lineshot-{kind}-{a.seed}')
    os.makedirs(d, exist_ok=True)
    if a.benches:
        benches(a, d)
        return
    ps = setups(a.seed, a.count)
    with concurrent.futures.ThreadPoolExecutor(os.cpu_count() or 2) as ex:
        photos = list(ex.map(lambda kp: render(a.binary[0], d, *kp), enumerate(ps)))
    runs = []
    for b in a.binary:
        with concurrent.futures.ThreadPoolExecutor(os.cpu_count() or 2) as ex:
            rs = list(ex.map(lambda ph: score(b, ph), photos))
        runs.append(rs)
        ds = [x for r in rs for x in r['d']]
        rms = math.sqrt(sum(x * x for x in ds) / len(ds)) if ds else float('nan')
        print(f"{b}: lamp recognised {sum(r['lamp'] for r in rs)}/{len(rs)}, lines found "
              f"{sum(r['found'] for r in rs)}/{sum(r['n'] for r in rs)}, RMS {rms:.3f} px, "
              f"lines listed {sum(r['listed'] for r in rs)}, no output {sum(1 for r in rs if r['error'])}")
        for k, r in enumerate(rs):
            if r['error']:
                print(f"  c{k:03d}: {r['error']}")
    if len(runs) == 2:
        for k, (x, y) in enumerate(zip(*runs)):
            if x['lamp'] != y['lamp'] or x['found'] != y['found']:
                print(f"  c{k:03d} {ps[k]}: lamp {x['lamp']} -> {y['lamp']}, found {x['found']} -> {y['found']} of {x['n']}")


if __name__ == '__main__':
    main()
