"""``python -m calib plan NETWORK --tests N --out plan.csv``: propose the next tests (see calib.loop.plan)."""

from __future__ import annotations


def register(subparsers) -> None:
    p = subparsers.add_parser("plan", help="propose the next flow tests (greedy optimal design)")
    p.set_defaults(func=lambda args: 2)
