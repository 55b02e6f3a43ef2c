#!/usr/bin/env python3
"""Checks that the protocol's code, JSON Schemas, AsyncAPI document and reference page agree.

Runs the protocol_samples program (C++, built from tests/protocol/protocol_samples.cpp), then:
  1. every schema in protocol/schema/ is a valid draft-07 schema, and no $ref has sibling keywords
     (draft-07 ignores them) other than a description;
  2. every server sample validates against server_message.json and its own type's schema;
  3. every client sample the decoder accepts validates against client_message.json and its type's schema,
     and so does its canonical re-encoding; every sample the decoder rejects for a reason a schema can
     express is rejected by client_message.json too;
  4. the enums in defs.json equal the names in the code;
  5. protocol/asyncapi.yaml lists exactly the code's message types, each with its schema, every server
     type sent by an operation (or as a reply), every client type received; path, subprotocol and version
     agree with the code;
  6. docs/protocol.md has a section for every message type, names every error code, event kind and frame
     field, and its JSON examples match the schemas.

Usage: check_schemas.py --samples PATH/TO/pitchwire_protocol_samples --root REPOSITORY
Needs Debian's python3-jsonschema and python3-yaml. Exit status 0 when all agree, 1 otherwise.
"""
import argparse
import json
import pathlib
import re
import subprocess
import sys

import jsonschema
import yaml

failures = []


def fail(message):
    failures.append(message)
    print("FAIL: " + message, file=sys.stderr)


def load_schemas(schema_dir):
    schemas = {}
    for path in sorted(schema_dir.glob("*.json")):
        schemas[path.name] = (path.resolve().as_uri(), json.loads(path.read_text(encoding="utf-8")))
    return schemas


def check_ref_siblings(node, where):
    if isinstance(node, dict):
        if "$ref" in node:
            extra = set(node) - {"$ref", "description"}
            if extra:
                fail(f"{where}: keywords beside $ref are ignored by draft-07: {sorted(extra)}")
        for key, value in node.items():
            check_ref_siblings(value, f"{where}/{key}")
    elif isinstance(node, list):
        for i, value in enumerate(node):
            check_ref_siblings(value, f"{where}/{i}")


def validator_for(schemas, name):
    store = {uri: schema for uri, schema in schemas.values()}
    uri, schema = schemas[name]
    resolver = jsonschema.RefResolver(base_uri=uri, referrer=schema, store=store)
    return jsonschema.Draft7Validator(schema, resolver=resolver)


def first_error(validator, instance):
    error = next(iter(validator.iter_errors(instance)), None)
    if error is None:
        return None
    return f"{'/'.join(str(p) for p in error.absolute_path) or '(root)'}: {error.message[:300]}"


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", required=True, help="the pitchwire_protocol_samples program")
    parser.add_argument("--root", required=True, help="the repository")
    args = parser.parse_args()
    root = pathlib.Path(args.root)
    schema_dir = root / "protocol" / "schema"

    run = subprocess.run([args.samples], capture_output=True, text=True, check=True)
    lines = [json.loads(line) for line in run.stdout.splitlines() if line.strip()]
    constants = next(line for line in lines if line["kind"] == "constants")
    server_types = constants["server_types"]
    client_types = constants["client_types"]

    # 1. the schemas themselves
    schemas = load_schemas(schema_dir)
    for name, (_, schema) in schemas.items():
        try:
            jsonschema.Draft7Validator.check_schema(schema)
        except jsonschema.SchemaError as e:
            fail(f"schema/{name} is not a valid draft-07 schema: {e.message}")
        check_ref_siblings(schema, f"schema/{name}")
    for t in server_types + client_types:
        if f"{t}.json" not in schemas:
            fail(f"no schema/{t}.json for message type {t}")
        elif schemas[f"{t}.json"][1].get("properties", {}).get("type", {}).get("const") != t:
            fail(f"schema/{t}.json does not fix type to {t!r}")
    if failures:
        return 1
    validators = {name: validator_for(schemas, name) for name in schemas}

    # 2. and 3. the samples
    seen_server = set()
    seen_kinds = set()
    counts = {"server": 0, "accepted": 0, "rejected": 0}
    for line in lines:
        if line["kind"] == "server":
            counts["server"] += 1
            message = json.loads(line["text"])
            seen_server.add(message.get("type"))
            if message.get("type") == "event":
                seen_kinds.add(message.get("kind"))
            for name in ("server_message.json", f"{line['type']}.json"):
                problem = first_error(validators[name], message)
                if problem:
                    fail(f"server sample does not match {name}: {problem}\n  {line['text'][:300]}")
        elif line["kind"] == "client" and line["accepted"]:
            counts["accepted"] += 1
            for text in (line["text"], line["canonical"]):
                for name in ("client_message.json", f"{line['type']}.json"):
                    problem = first_error(validators[name], json.loads(text))
                    if problem:
                        fail(f"accepted client sample does not match {name}: {problem}\n  {text[:300]}")
        elif line["kind"] == "client":
            counts["rejected"] += 1
            if not line["schema_rejects"]:
                continue
            try:
                message = json.loads(line["text"])
            except ValueError:
                continue  # not JSON at all: nothing for a schema to accept
            if first_error(validators["client_message.json"], message) is None:
                fail(f"the decoder rejects ({line['code']}) but client_message.json accepts: {line['text'][:300]}")
    for t in set(server_types) - seen_server:
        fail(f"no sample of server message {t}")
    for k in set(constants["event_kinds"]) - seen_kinds:
        fail(f"no sample of event kind {k}")

    # 4. enums
    definitions = schemas["defs.json"][1]["definitions"]
    for definition, key in [("error_code", "error_codes"), ("event_kind", "event_kinds"), ("frame_field", "frame_fields"),
                            ("role", "roles"), ("band_position", "band_positions"), ("client_type", "client_types")]:
        if definitions[definition]["enum"] != constants[key]:
            fail(f"defs.json {definition} {definitions[definition]['enum']} differs from the code's {constants[key]}")
    event_schema = schemas["event.json"][1]
    if sorted(event_schema["definitions"]) != sorted(constants["event_kinds"]):
        fail("event.json has no payload definition for every event kind, or one too many")

    # 5. AsyncAPI
    doc = yaml.safe_load((root / "protocol" / "asyncapi.yaml").read_text(encoding="utf-8"))
    if doc.get("asyncapi") != "3.0.0":
        fail("asyncapi.yaml is not AsyncAPI 3.0.0")
    if str(doc["info"]["version"]) != str(constants["protocol"]):
        fail(f"asyncapi.yaml info.version {doc['info']['version']} is not protocol {constants['protocol']}")
    messages = doc["components"]["messages"]
    if set(messages) != set(server_types + client_types):
        fail(f"asyncapi.yaml components.messages {sorted(messages)} differ from the code's message types")
    for name, message in messages.items():
        ref = message.get("payload", {}).get("schema", {}).get("$ref", "")
        if ref != f"./schema/{name}.json" or not (root / "protocol" / ref).is_file():
            fail(f"asyncapi.yaml message {name}: payload schema {ref!r} is not ./schema/{name}.json")
        if message.get("name") != name:
            fail(f"asyncapi.yaml message {name} has name {message.get('name')!r}")
    channel = doc["channels"]["session"]
    if channel["address"] != constants["path"]:
        fail(f"asyncapi.yaml channel address {channel['address']} is not {constants['path']}")
    if constants["subprotocol"] not in json.dumps(channel):
        fail(f"asyncapi.yaml channel does not name the subprotocol {constants['subprotocol']}")
    for name, ref in channel["messages"].items():
        if ref.get("$ref") != f"#/components/messages/{name}":
            fail(f"asyncapi.yaml channel message {name} refers to {ref.get('$ref')}")
    sent, received = set(), set()
    for op_name, op in doc["operations"].items():
        names = {m["$ref"].rsplit("/", 1)[-1] for m in op.get("messages", [])}
        replies = {m["$ref"].rsplit("/", 1)[-1] for m in op.get("reply", {}).get("messages", [])}
        if op["action"] == "send":
            sent |= names
        else:
            received |= names
            sent |= replies
        for n in names | replies:
            if n not in channel["messages"]:
                fail(f"asyncapi.yaml operation {op_name} uses {n}, which the channel does not list")
    if sent != set(server_types):
        fail(f"asyncapi.yaml sends {sorted(sent)}, the code's server types are {sorted(server_types)}")
    if received != set(client_types):
        fail(f"asyncapi.yaml receives {sorted(received)}, the code's client types are {sorted(client_types)}")

    # 6. the reference page
    page = (root / "docs" / "protocol.md").read_text(encoding="utf-8")
    headings = set(re.findall(r"^#{2,4} `([a-z_]+)`", page, flags=re.MULTILINE))
    for t in server_types + client_types:
        if t not in headings:
            fail(f"docs/protocol.md has no section headed `{t}`")
    for key in ("error_codes", "event_kinds", "frame_fields", "roles"):
        for n in constants[key]:
            if f"`{n}`" not in page:
                fail(f"docs/protocol.md does not name `{n}` ({key})")
    for needle in (constants["subprotocol"], constants["path"]):
        if needle not in page:
            fail(f"docs/protocol.md does not mention {needle}")
    examples = re.findall(r"```json\n(.*?)```", page, flags=re.DOTALL)
    for example in examples:
        message = json.loads(example)
        envelope = "server_message.json" if message.get("type") in server_types else "client_message.json"
        problem = first_error(validators[envelope], message)
        if problem:
            fail(f"docs/protocol.md example does not match {envelope}: {problem}\n  {example[:300]}")
    if len(examples) < len(server_types + client_types):
        fail(f"docs/protocol.md has {len(examples)} JSON examples, fewer than the message types")

    print(f"checked {counts['server']} server samples, {counts['accepted']} accepted and {counts['rejected']} "
          f"rejected client samples, {len(schemas)} schemas, asyncapi.yaml, docs/protocol.md and its "
          f"{len(examples)} examples")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
