#!/usr/bin/env python3
"""Calling plumb-serve from a Python service: Recommend, RankCandidates and SimilarItems with a
deadline, and what to do with every status code plumb documents (proto/plumb/v1/ranker.proto).

Needs Debian's python3-grpcio and python3-protobuf, and the message classes generated from
plumb's .proto files by Debian's protoc (package protobuf-compiler):

    protoc -I proto --python_out=gen proto/plumb/v1/ranker.proto
    PYTHONPATH=gen python3 examples/python/plumb_client.py --server 127.0.0.1:7400 --user m17

The calls are made with grpcio's generic multi-callables (what the generated *_pb2_grpc stubs
do inside), so no gRPC code generator is needed. Run as a program it makes the three calls,
then shows the error handling with calls that are wrong on purpose; it exits 0 when every
answer was handled as documented.
"""
import argparse
import logging
import sys
import time

import grpc

from plumb.v1 import ranker_pb2

log = logging.getLogger("plumb_client")

# What a caller does with each status code: (retry?, what it means, what to do).
#  - retry: only for codes that say "not now": UNAVAILABLE (no version loaded yet, or the
#    server restarting) and RESOURCE_EXHAUSTED (no thread free). Never for the caller's own
#    mistakes, and never past the request's own time budget (DEADLINE_EXCEEDED).
POLICY = {
    grpc.StatusCode.INVALID_ARGUMENT: (False, "the request breaks a limit; the message names "
                                              "the field", "fix the caller; do not retry"),
    grpc.StatusCode.NOT_FOUND: (False, "unknown user or item", "fall back (see below)"),
    grpc.StatusCode.FAILED_PRECONDITION: (False, "the item has a zero vector",
                                          "show no similar items"),
    grpc.StatusCode.UNAVAILABLE: (True, "no version loaded yet, or the server is down",
                                  "retry with backoff, then fall back"),
    grpc.StatusCode.RESOURCE_EXHAUSTED: (True, "the server is overloaded",
                                         "back off, retry once, then fall back"),
    grpc.StatusCode.DEADLINE_EXCEEDED: (False, "the answer did not come in time",
                                        "fall back; the time budget is spent"),
    grpc.StatusCode.UNAUTHENTICATED: (False, "missing or wrong credentials",
                                      "fix the configuration"),
    grpc.StatusCode.INTERNAL: (False, "a bug in plumb-serve", "report it; fall back"),
}


class PlumbError(Exception):
    """A call that failed for a reason a retry cannot fix (or after its retries)."""

    def __init__(self, method, code, details):
        super().__init__("%s: %s: %s" % (method, code.name, details))
        self.code = code
        self.details = details


class PlumbClient:
    """A small client for plumb.v1.Ranker. One instance per process: the channel is reused.

    deadline: seconds per attempt (a ranking call takes about a millisecond in plumb-serve;
    set what your page can afford). retries: extra attempts for UNAVAILABLE and
    RESOURCE_EXHAUSTED, with exponential backoff starting at `backoff` seconds.
    """

    def __init__(self, target, deadline=0.2, retries=2, backoff=0.05, credentials=None):
        channel = (grpc.secure_channel(target, credentials) if credentials
                   else grpc.insecure_channel(target))
        self._deadline, self._retries, self._backoff = deadline, retries, backoff

        def method(name, request, response):
            return channel.unary_unary("/plumb.v1.Ranker/" + name,
                                       request_serializer=request.SerializeToString,
                                       response_deserializer=response.FromString)

        self._recommend = method("Recommend", ranker_pb2.RecommendRequest,
                                 ranker_pb2.RecommendResponse)
        self._rank = method("RankCandidates", ranker_pb2.RankCandidatesRequest,
                            ranker_pb2.RankCandidatesResponse)
        self._similar = method("SimilarItems", ranker_pb2.SimilarItemsRequest,
                               ranker_pb2.SimilarItemsResponse)

    def _call(self, name, stub, request, deadline=None):
        delay = self._backoff
        for attempt in range(self._retries + 1):
            try:
                return stub(request, timeout=self._deadline if deadline is None else deadline)
            except grpc.RpcError as e:
                retry, meaning, action = POLICY.get(e.code(), (False, "unexpected", "fall back"))
                if retry and attempt < self._retries:
                    log.info("%s: %s (%s); retrying in %.0f ms", name, e.code().name, meaning,
                             delay * 1000)
                    time.sleep(delay)
                    delay *= 2
                    continue
                raise PlumbError(name, e.code(), e.details()) from None

    def recommend(self, user_id, count=10, recent=(), exclude=(), deadline=None):
        """Top-N for a user: (item ids, model version, how). `how` is "personal", "folded in"
        (an unknown user, from `recent`) or "popular" (an unknown user without usable recent
        items: the most-interacted items, marked as not personal)."""
        request = ranker_pb2.RecommendRequest(user_id=user_id, count=count,
                                              recent_item_ids=list(recent),
                                              exclude_item_ids=list(exclude))
        try:
            r = self._call("Recommend", self._recommend, request, deadline)
        except PlumbError as e:
            if e.code != grpc.StatusCode.NOT_FOUND:
                raise
            # Unknown user: ask again for the declared fallback instead of showing nothing.
            request.unknown_user = ranker_pb2.UNKNOWN_USER_MOST_INTERACTED
            r = self._call("Recommend", self._recommend, request, deadline)
        how = "popular" if r.fallback else "folded in" if r.folded_in else "personal"
        return [i.item_id for i in r.items], r.model_version, how

    def rank(self, user_id, candidates, recent=(), deadline=None):
        """The known candidates best first, and the unknown ones (left in your order)."""
        r = self._call("RankCandidates", self._rank,
                       ranker_pb2.RankCandidatesRequest(user_id=user_id,
                                                        candidate_item_ids=list(candidates),
                                                        recent_item_ids=list(recent)),
                       deadline)
        return [i.item_id for i in r.items], list(r.unknown_item_ids), r.model_version

    def similar(self, item_id, count=10, deadline=None):
        """Items like `item_id`; [] for an unknown item or one with a zero vector."""
        try:
            r = self._call("SimilarItems", self._similar,
                           ranker_pb2.SimilarItemsRequest(item_id=item_id, count=count), deadline)
        except PlumbError as e:
            if e.code in (grpc.StatusCode.NOT_FOUND, grpc.StatusCode.FAILED_PRECONDITION):
                return []
            raise
        return [i.item_id for i in r.items]


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--server", default="127.0.0.1:7400", help="plumb-serve HOST:PORT")
    parser.add_argument("--user", required=True, help="a user the active version knows")
    parser.add_argument("--item", default="", help="an item the active version knows")
    parser.add_argument("--candidates", default="", help="comma-separated item ids to rank")
    parser.add_argument("--deadline", type=float, default=0.5, help="seconds per attempt")
    args = parser.parse_args()
    logging.basicConfig(level=logging.INFO, format="%(name)s: %(message)s")
    client = PlumbClient(args.server, deadline=args.deadline)
    handled = True

    def show(what, call):
        nonlocal handled
        try:
            print("%s: %s" % (what, call()))
        except PlumbError as e:
            retry, meaning, action = POLICY.get(e.code, (False, "unexpected", "fall back"))
            print("%s: %s (%s): %s -- %s" % (what, e.code.name, meaning, e.details, action))
            if e.code not in POLICY:
                handled = False

    show("recommend", lambda: client.recommend(args.user, count=5))
    if args.candidates:
        show("rank", lambda: client.rank(args.user, args.candidates.split(",")))
    if args.item:
        show("similar", lambda: client.similar(args.item, count=5))
    # Wrong on purpose, to show each documented answer and its handling.
    show("recommend, unknown user", lambda: client.recommend("no-such-user-42", count=5))
    show("recommend, count 0 (INVALID_ARGUMENT)", lambda: client.recommend(args.user, count=0))
    show("similar, unknown item (NOT_FOUND -> [])", lambda: client.similar("no-such-item-42"))
    return 0 if handled else 1


if __name__ == "__main__":
    sys.exit(main())
