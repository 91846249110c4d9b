#!/usr/bin/python3
"""Submit a power x chirp map to glissd, show progress, save the counts as NumPy arrays."""
import argparse, os, sys
sys.dont_write_bytecode = True  # keep the checkout free of __pycache__
sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
import grpc, numpy as np
from gliss.v1 import scan_pb2 as pb, scan_pb2_grpc

ap = argparse.ArgumentParser(description=__doc__)
ap.add_argument("--server", default="127.0.0.1:7355")
ap.add_argument("--out", default=".", help="directory for map.npz")
ap.add_argument("--gdd-ps2", default="-20:20:9", help="GDD axis FROM:TO:N, slow (write --gdd-ps2=-20:20:9)")
ap.add_argument("--power-uw", default="0.05:64:17", help="power axis FROM:TO:N (fast, amplitude spaced)")
ap.add_argument("--gate-ms", type=float, default=100)
a = ap.parse_args()
rng = lambda s: pb.Range(**{k: t(v) for (k, t), v in zip([("from", float), ("to", float), ("count", int)], s.split(":"))})
spec = pb.ScanSpec(name="python map", gate_ms=a.gate_ms, snake=True, axes=[
    pb.Axis(kind=pb.AXIS_KIND_GDD_PS2, range=rng(a.gdd_ps2)),
    pb.Axis(kind=pb.AXIS_KIND_POWER_UW, range=rng(a.power_uw), spacing=pb.POWER_SPACING_AMPLITUDE)])
scans = scan_pb2_grpc.ScanServiceStub(grpc.insecure_channel(a.server))
scan = scans.SubmitScan(pb.SubmitScanRequest(spec=spec)).scan
shape = tuple(scan.preview.axis_counts)
axes = [np.full(n, np.nan) for n in shape]
counts = {ch: np.full(shape, np.nan) for ch in scan.channels}
for ev in scans.WatchScan(pb.WatchScanRequest(id=scan.id)):
    if ev.HasField("scan"):
        scan = ev.scan
    elif ev.HasField("point"):
        p = ev.point
        for k, i in enumerate(p.index):
            axes[k][i] = p.values[k]
        for ch, c in zip(scan.channels, p.counts):
            counts[ch][tuple(p.index)] = c
        print(f"\r{p.seq + 1}/{scan.preview.points} points, last {dict(zip(scan.channels, p.counts))}", end="", file=sys.stderr)
print(f"\n{scan.id}: {pb.ScanState.Name(scan.state)}", file=sys.stderr)
if scan.state != pb.SCAN_STATE_SUCCEEDED:
    sys.exit(f"scan ended {pb.ScanState.Name(scan.state)}: {scan.reason}")
out = os.path.join(a.out, "map.npz")
np.savez(out, gdd_ps2=axes[0], power_uw=axes[1], **{"counts_" + ch: c for ch, c in counts.items()})
print(out)
