"""A real gRPC client (Debian's python3-grpcio) that sends hand-encoded protobuf bytes to a
running plumb-train and plumb-serve: messages whose string fields hold invalid UTF-8, which
protobuf cannot decode. Every such call must fail with INVALID_ARGUMENT naming the field, a
Publish stream must never answer OK for a stream it did not read to the end, and nothing
of an undecodable PublishBatch may be stored.

Usage: undecodable_messages.py TRAIN_ADDR SERVE_ADDR
Prints one "ok: ..." line per check and exits non-zero at the first failure.

The encoding follows the protobuf wire format (protobuf.dev, "Encoding": a tag is
field_number << 3 | wire_type; wire type 0 is a varint, 2 is length-delimited) with the
field numbers of proto/plumb/v1/ingest.proto, ranker.proto and control.proto.
"""
import sys

import grpc

TIMEOUT = 20


def varint(n):
    out = bytearray()
    while True:
        b = n & 0x7F
        n >>= 7
        if n:
            out.append(b | 0x80)
        else:
            out.append(b)
            return bytes(out)


def field_bytes(number, data):
    return varint(number << 3 | 2) + varint(len(data)) + data


def field_varint(number, value):
    return varint(number << 3 | 0) + varint(value)


def event(user, item, event_id, ts=1_700_000_000_000):
    """plumb.v1.InteractionEvent: user_id 1, item_id 2, timestamp_ms 3, event_id 4."""
    return (field_bytes(1, user) + field_bytes(2, item) + field_varint(3, ts) +
            field_bytes(4, event_id))


def decode_varints(data):
    """The varint fields of a message, {number: value} (PublishSummary's counts)."""
    fields, i = {}, 0
    while i < len(data):
        key, i = read_varint(data, i)
        number, wire = key >> 3, key & 7
        if wire == 0:
            fields[number], i = read_varint(data, i)
        elif wire == 2:
            length, i = read_varint(data, i)
            i += length
        else:
            raise ValueError("unexpected wire type %d" % wire)
    return fields


def read_varint(data, i):
    shift = value = 0
    while True:
        b = data[i]
        i += 1
        value |= (b & 0x7F) << shift
        shift += 7
        if not b & 0x80:
            return value, i


def fail(message):
    print("FAIL: " + message)
    sys.exit(1)


def expect_invalid(call, what, *phrases):
    try:
        answer = call()
    except grpc.RpcError as e:
        if e.code() != grpc.StatusCode.INVALID_ARGUMENT:
            fail("%s: got %s '%s', want INVALID_ARGUMENT" % (what, e.code().name, e.details()))
        for p in phrases:
            if p not in (e.details() or ""):
                fail("%s: message '%s' does not say '%s'" % (what, e.details(), p))
        print("ok: %s -> INVALID_ARGUMENT: %s" % (what, e.details()))
        return
    fail("%s: answered OK (%r) instead of INVALID_ARGUMENT" % (what, answer))


def main():
    train_addr, serve_addr = sys.argv[1], sys.argv[2]
    train = grpc.insecure_channel(train_addr)
    serve = grpc.insecure_channel(serve_addr)
    grpc.channel_ready_future(train).result(timeout=TIMEOUT)
    grpc.channel_ready_future(serve).result(timeout=TIMEOUT)
    publish = train.stream_unary("/plumb.v1.EventIngest/Publish")
    publish_batch = train.unary_unary("/plumb.v1.EventIngest/PublishBatch")

    def log_end():
        """The trainer's log end, from the summary of an empty Publish stream."""
        return decode_varints(publish(iter([]), timeout=TIMEOUT)).get(5, 0)

    start = log_end()
    good = [event(b"m%d" % i, b"t%d" % i, b"u-%d" % i) for i in range(7)]
    bad = list(good)
    bad[3] = event(b"m\xff\xfe3", b"t3", b"u-3")  # 0xFF never occurs in UTF-8 (RFC 3629)

    # 1. A stream with one undecodable message fails; the three events before it are stored.
    expect_invalid(lambda: publish(iter(bad), timeout=TIMEOUT), "Publish, message 3 bad",
                   "stream message 3", "user_id is not valid UTF-8",
                   "3 of the 3 events before it were appended")
    after = log_end()
    if after != start + 3:
        fail("after the failed stream the log grew by %d events, want 3" % (after - start))
    print("ok: the 3 events before the bad message are stored, nothing after it")

    # Resending the corrected stream with the same event ids completes it exactly once.
    summary = decode_varints(publish(iter(good), timeout=TIMEOUT))
    if summary.get(1, 0) != 4 or summary.get(3, 0) != 3:
        fail("resent stream: accepted %d, duplicates %d; want 4 and 3" %
             (summary.get(1, 0), summary.get(3, 0)))
    print("ok: resending the stream stores the other 4 events; the first 3 come back as "
          "duplicates")

    # 2. A PublishBatch holding one undecodable event is refused whole, naming the event.
    before = log_end()
    batch = b"".join(field_bytes(1, e) for e in [
        event(b"m10", b"t1", b"b-0"), event(b"m11", b"t1", b"b-1"),
        event(b"m12", b"t\xc0\xaf", b"b-2")])  # C0 AF: an overlong "/", invalid UTF-8
    expect_invalid(lambda: publish_batch(batch, timeout=TIMEOUT), "PublishBatch, event 2 bad",
                   "events[2].item_id is not valid UTF-8")
    if log_end() != before:
        fail("the refused PublishBatch stored events")
    print("ok: nothing of the refused batch is stored")

    # 3. ModelControl and Ranker unary calls: INVALID_ARGUMENT, not INTERNAL with no message.
    get_status = train.unary_unary("/plumb.v1.ModelControl/GetStatus")
    expect_invalid(lambda: get_status(b"\x0a\x05ab", timeout=TIMEOUT),
                   "GetStatus, truncated bytes", "truncated")
    recommend = serve.unary_unary("/plumb.v1.Ranker/Recommend")
    expect_invalid(lambda: recommend(field_bytes(1, b"\xed\xa0\x80") + field_varint(2, 5),
                                     timeout=TIMEOUT),
                   "Recommend, user_id a UTF-16 surrogate", "user_id is not valid UTF-8")
    rank = serve.unary_unary("/plumb.v1.Ranker/RankCandidates")
    expect_invalid(lambda: rank(field_bytes(1, b"m1") + field_bytes(2, b"t1") +
                                field_bytes(2, b"t\x80"), timeout=TIMEOUT),
                   "RankCandidates, second candidate bad",
                   "candidate_item_ids[1] is not valid UTF-8")
    print("all undecodable-message checks passed")


if __name__ == "__main__":
    main()
