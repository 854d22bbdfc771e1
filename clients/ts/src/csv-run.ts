// Posts a CSV run through a client generated from openapi/openapi.yaml
// (openapi-typescript types, openapi-fetch), as a LIMS or instrument bridge
// would, then reads the run back. Driven by api/tsclient_test.go against a
// real server: CURVEKEEPER_URL, CURVEKEEPER_TOKEN, CURVEKEEPER_METHOD,
// CURVEKEEPER_INSTRUMENT. Prints one JSON line for the Go test to check.
import createClient from "openapi-fetch";
import type { paths } from "../gen/schema.js";

function env(name: string): string {
  const v = process.env[name];
  if (!v) throw new Error(`${name} is not set`);
  return v;
}

const client = createClient<paths>({
  baseUrl: env("CURVEKEEPER_URL"),
  headers: { Authorization: `Bearer ${env("CURVEKEEPER_TOKEN")}` },
});

const csv = [
  "# exported by the instrument (comment lines are skipped)",
  "kind,analyte,level,concentration,response,sample_id,dilution",
  "standard,nitrate,L1,0.5,0.0102,,",
  "standard,nitrate,L1,0.5,0.0098,,",
  "standard,nitrate,L2,1.0,0.0205,,",
  "standard,nitrate,L3,2.0,0.0411,,",
  "standard,nitrate,L4,4.0,0.0819,,",
  "standard,nitrate,L5,8.0,0.1642,,",
  "sample,nitrate,,,0.0250,W-0042,",
  "",
].join("\n");

// The body is the CSV text as it is: openapi-fetch serializes bodies as JSON
// unless told otherwise, so the identity serializer and the media type are
// given here, as the operation's one content type asks.
const posted = await client.POST("/v1/runs/csv", {
  params: {
    query: {
      method: env("CURVEKEEPER_METHOD"),
      instrument: env("CURVEKEEPER_INSTRUMENT"),
      acquired_at: "2026-03-02T08:00:00Z",
    },
    header: { "Idempotency-Key": "ts-client-csv-1" },
  },
  body: csv,
  bodySerializer: (body: string) => body,
  headers: { "Content-Type": "text/csv" },
});
if (!posted.data) {
  console.log(JSON.stringify({ status: posted.response.status, error: posted.error }));
  process.exit(1);
}
const run = await client.GET("/v1/runs/{id}", { params: { path: { id: posted.data.id } } });
console.log(
  JSON.stringify({
    status: posted.response.status,
    id: posted.data.id,
    curves: posted.data.curves.map((c) => c.analyte),
    read_status: run.response.status,
    format: run.data?.format,
    standards: run.data?.standards.length,
    ratelimit_remaining: posted.response.headers.get("RateLimit-Remaining"),
  }),
);
