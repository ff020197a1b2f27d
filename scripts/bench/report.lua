-- wrk script: optional POST body from a file, bearer token, and a one-line JSON summary
-- (requests/s, p50, p99 in ms, error counts) printed at the end.
--   wrk ... -s report.lua URL -- BODY_FILE TOKEN
local body_file, token = nil, nil

function init(args)
  body_file = args[1]
  token = args[2]
  if body_file ~= nil and body_file ~= "" and body_file ~= "-" then
    local f = assert(io.open(body_file, "rb"))
    wrk.body = f:read("*a")
    f:close()
    wrk.method = "POST"
    wrk.headers["Content-Type"] = "application/json"
  end
  if token ~= nil and token ~= "" then
    wrk.headers["Authorization"] = "Bearer " .. token
  end
end

function done(summary, latency, requests)
  local e = summary.errors
  io.write(string.format(
    '{"requests": %d, "seconds": %.3f, "rps": %.1f, "p50_ms": %.3f, "p99_ms": %.3f, ' ..
    '"non_2xx": %d, "connect_errors": %d, "read_errors": %d, "write_errors": %d, "timeouts": %d}\n',
    summary.requests, summary.duration / 1e6, summary.requests / (summary.duration / 1e6),
    latency:percentile(50) / 1000, latency:percentile(99) / 1000,
    e.status, e.connect, e.read, e.write, e.timeout))
end
