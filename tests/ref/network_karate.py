#!/usr/bin/python3
"""Reference check: Louvain of the network module on Zachary's karate club.

Source: Zachary (1977), the karate club graph as networkx ships it (networkx.karate_club_graph,
34 members, 78 ties), used unweighted (its 'weight' attribute is ignored). Exported at test
time as a 0-based edge list and clustered by the network module's pm_cluster_louvain through
the tool mode of the unit-test program (build/test_network --edges FILE SEEDS RESTARTS).

References:
- modularity >= 0.40 for every seed tried with the default 10 restarts; the best known
  partition of the unweighted graph scores about 0.4198 (from memory), so nothing may exceed
  0.4198 + 1e-4
- the modularity reported equals networkx.community.modularity of the membership returned,
  to 1e-9, for every seed, with 10 restarts and with 1
Single runs (1 restart) are reported, not bounded: Louvain is a heuristic and a single run can
end below 0.40.
"""

import statistics
import subprocess
import sys
from pathlib import Path

import networkx as nx

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

SEEDS = 50


def tool():
    return C.binary().parent / "test_network"


def run(path, restarts):
    p = subprocess.run([str(tool()), "--edges", str(path), str(SEEDS), str(restarts)],
                       capture_output=True, text=True, timeout=600)
    if p.returncode != 0:
        raise C.RunError(f"test_network exited {p.returncode}: {p.stderr.strip()}")
    out = []
    for line in p.stdout.splitlines():
        f = line.split()
        out.append((int(f[0]), float(f[1]), [int(x) for x in f[2:]]))
    return out


def main():
    if not tool().is_file():
        print(f"SETUP ERROR: {tool()} not found (build the unit tests)")
        return 2
    chk = C.Checker("network_karate (Zachary 1977 via networkx.karate_club_graph)")
    G = nx.Graph(nx.karate_club_graph().edges())  # unweighted copy: source networkx
    chk.equal("karate: 34 vertices, 78 edges", (G.number_of_nodes(), G.number_of_edges()),
              (34, 78))
    with C.tempdir() as td:
        path = Path(td) / "karate.txt"
        path.write_text("".join(f"{a} {b}\n" for a, b in G.edges()))
        for restarts in (10, 1):
            qs = []
            for seed, q, memb in run(path, restarts):
                comms = {}
                for v, c in enumerate(memb):
                    comms.setdefault(c, set()).add(v)
                ref = nx.community.modularity(G, list(comms.values()))
                chk.close(f"{restarts} restart(s): modularity == networkx.community.modularity",
                          q, ref, atol=1e-9, kind="abs", where=f"seed {seed}")
                if q > 0.4198 + 1e-4:
                    chk.fail(f"seed {seed}: modularity {q} above the best known 0.4198")
                if restarts == 10 and q < 0.40:
                    chk.fail(f"seed {seed}, 10 restarts: modularity {q:.4f} < 0.40")
                qs.append(q)
            chk.note(f"{restarts} restart(s), seeds 1..{SEEDS}: modularity min {min(qs):.4f}, "
                     f"median {statistics.median(qs):.4f}, max {max(qs):.4f}")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
