-- wrk script for the load benchmark: POST the JSON body in the file named by OGIVE_BODY, and at
-- the end print one machine-readable line: requests per second, p50 and p99 latency (µs),
-- and the count of non-2xx answers and socket errors.
wrk.method = "POST"
wrk.headers["Content-Type"] = "application/json"
local file = assert(io.open(os.getenv("OGIVE_BODY"), "rb"))
wrk.body = file:read("*a")
file:close()

function done(summary, latency, requests)
  local seconds = summary.duration / 1e6
  local errors = summary.errors.connect + summary.errors.read + summary.errors.write + summary.errors.timeout
  io.write(string.format("RESULT rps=%.1f p50_us=%d p99_us=%d non2xx=%d socket_errors=%d\n",
    summary.requests / seconds, latency:percentile(50), latency:percentile(99),
    summary.errors.status, errors))
end
