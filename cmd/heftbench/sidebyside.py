#!/usr/bin/python3
"""Time whole commands side by side, alternating A B C A B C ..., with GNU
time (/usr/bin/time -f '%e %M'): wall seconds and peak RSS of each run.
Prints the median of each, and each command's median ratio to the first,
computed run by run so that drift in the machine's speed cancels.

    sidebyside.py -n 5 --name heft -- CMD ... --name peer -- CMD ...

Commands are shell strings (sh -c). Their output goes to /dev/null.
"""
import argparse
import statistics
import subprocess
import sys
import tempfile


def run_once(cmd):
    with tempfile.NamedTemporaryFile("r") as tf:
        p = subprocess.run(["/usr/bin/time", "-o", tf.name, "-f", "%e %M", "sh", "-c", cmd],
                           stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        if p.returncode != 0:
            sys.exit("command failed (%d): %s\n%s" % (p.returncode, cmd, p.stderr[-2000:]))
        wall, rss = tf.read().split()[-2:]
        return float(wall), int(rss) * 1024


def main():
    argv = sys.argv[1:]
    first = argv.index("--name") if "--name" in argv else len(argv)
    ap = argparse.ArgumentParser()
    ap.add_argument("-n", type=int, default=5)
    ap.add_argument("--warmup", type=int, default=1)
    ap.add_argument("--rows", type=int, default=0, help="rows each command processes: adds a rows/s column")
    a = ap.parse_args(argv[:first])
    names, cmds = [], []
    it = iter(argv[first:])
    for tok in it:
        if tok != "--name":
            sys.exit("expected --name NAME -- CMD, got %r" % tok)
        names.append(next(it))
        if next(it) != "--":
            sys.exit("expected -- after --name %s" % names[-1])
        cmds.append(next(it))
    for _ in range(a.warmup):
        for c in cmds:
            run_once(c)
    walls = [[] for _ in cmds]
    rsss = [[] for _ in cmds]
    for _ in range(a.n):
        for i, c in enumerate(cmds):
            w, r = run_once(c)
            walls[i].append(w)
            rsss[i].append(r)
    head = "%-28s %10s %10s %10s %12s %16s" % ("command", "median s", "min s", "max s", "peak RSS MiB", "ratio to first")
    print(head + ("  %12s" % "rows/s" if a.rows else ""))
    for i, n in enumerate(names):
        ratios = [walls[i][k] / walls[0][k] for k in range(a.n)]
        med = statistics.median(walls[i])
        line = "%-28s %10.3f %10.3f %10.3f %12.1f %16.3f" % (
            n, med, min(walls[i]), max(walls[i]),
            statistics.median(rsss[i]) / 2**20, statistics.median(ratios))
        if a.rows:
            line += "  %12.0f" % (a.rows / med if med > 0 else float("inf"))
        print(line)


if __name__ == "__main__":
    main()
