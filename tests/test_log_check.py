"""What the Kafka log check finds from a look at a log (no broker: the look is given), the
one line it stops with, and the options around it that `run` checks before reading."""

from __future__ import annotations

import pytest

from stream_miner.cli.main import main
from stream_miner.connectors.kafka_log_check import LogState, problems, refusal


def state(first=0, end=100, committed=None, topic_id="id-now"):
    return LogState(topic_id, {0: first, 1: first}, {0: end, 1: end}, committed or {})


def test_offsets_inside_the_log_are_fine_at_both_ends():
    assert problems(state(first=10, end=100), {0: 10, 1: 100}, "id-now") == []


def test_a_checkpoint_past_the_end_is_a_lost_log():
    (found,) = problems(state(end=100), {0: 101}, None)
    assert found.partition == 0 and found.checkpoint_only
    assert "checkpointed next offset 101 is past the log's end 100" in found.text


def test_a_checkpoint_before_the_first_offset_names_the_deleted_messages():
    (found,) = problems(state(first=50), {1: 20}, None)
    assert found.partition == 1
    assert "messages 20-49 were deleted unread" in found.text


def test_committed_offsets_are_checked_too_and_then_start_fresh_is_not_offered():
    found = problems(state(end=100, committed={0: 400}), {}, None)
    assert [p.text for p in found] == [
        "partition 0: committed next offset 400 is past the log's end 100 (the log was lost or cut)"
    ]
    line = str(refusal("baskets", "127.0.0.1:9092", found))
    assert "--accept-new-log" in line and "--accept-gap" in line and "--start-fresh" not in line


def test_a_changed_topic_id_is_a_recreated_topic():
    found = problems(state(topic_id="id-now"), {0: 5}, "id-then")
    assert [(p.partition, p.text) for p in found] == [
        (None, "the topic was recreated (its id is id-now, the checkpoint's id-then)")
    ]


@pytest.mark.parametrize("recorded, now", [(None, "id-now"), ("id-then", None)])
def test_no_id_on_either_side_compares_offsets_only(recorded, now):
    assert problems(state(topic_id=now), {0: 5}, recorded) == []


def test_the_stop_is_one_line_naming_topic_broker_offsets_and_every_option():
    found = problems(state(end=7), {0: 9, 1: 8}, None)
    line = str(refusal("baskets", "127.0.0.1:9092", found))
    assert "\n" not in line
    assert line.startswith("Kafka topic baskets at 127.0.0.1:9092 no longer holds what was read: ")
    assert "partition 0: checkpointed next offset 9" in line
    assert "partition 1: checkpointed next offset 8" in line
    assert all(option in line for option in ("--accept-new-log", "--accept-gap", "--start-fresh"))


def test_many_problems_are_counted_after_the_first_three():
    log = LogState(None, dict.fromkeys(range(6), 0), dict.fromkeys(range(6), 1), {})
    line = str(refusal("t", "h:1", problems(log, dict.fromkeys(range(6), 5), None)))
    assert line.count("partition ") == 3 and "and 3 more" in line


@pytest.mark.parametrize(
    "options, message",
    [
        (["--accept-gap"], "--accept-new-log and --accept-gap are for a Kafka source"),
        (["--stop-within", "0"], "--stop-within must be positive, got 0"),
    ],
)
def test_options_that_do_not_fit_are_one_line(tmp_path, capsys, options, message):
    data = tmp_path / "b.jsonl"
    data.write_text('{"items": ["tea"]}\n')
    args = ["run", "--source", f"file:{data}", "--window-size", "5", "--tick-every", "5", *options]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert err.strip().splitlines() == [f"stream-miner: error: {message}"]


def test_the_two_log_options_exclude_each_other(capsys):
    args = ["run", "--source", "kafka://127.0.0.1:9/t", "--group", "g", "--window-size", "5"]
    assert main([*args, "--tick-every", "5", "--accept-new-log", "--accept-gap"]) == 2
    assert "give one" in capsys.readouterr().err
