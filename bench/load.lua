-- wrk script for bench/load.sh. Arguments (after `--`): MODE LIMIT TOKEN [PATH] [BODY_FILE]
-- [WRITE_PATH] [WRITE_BODY_FILE]
--   get    PATH                         GET PATH with the bearer token
--   post   PATH BODY_FILE               POST the file's bytes as JSON
--   mixed  PATH _ WRITE_PATH WRITE_BODY 90 % GET PATH, 10 % POST WRITE_BODY to WRITE_PATH
-- LIMIT bounds the requests of each thread: a thread stops after LIMIT answers, so a run ends
-- at the first of its duration (-d) and its request budget. `done` prints one JSON line.

local mode, limit, token, path, body, write_path, write_body, json_headers
local answered = 0
local counter = 0

local function slurp(name)
  local f = assert(io.open(name, "rb"))
  local s = f:read("*a")
  f:close()
  return s
end

function init(args)
  mode, limit, token, path = args[1], tonumber(args[2]), args[3], args[4]
  if args[5] and args[5] ~= "_" then body = slurp(args[5]) end
  write_path = args[6]
  if args[7] then write_body = slurp(args[7]) end
  wrk.headers["Authorization"] = "Bearer " .. token
  -- wrk.format uses the table it is given instead of wrk.headers, not with it.
  json_headers = { ["Authorization"] = "Bearer " .. token, ["Content-Type"] = "application/json" }
end

function request()
  counter = counter + 1
  if mode == "get" then
    return wrk.format("GET", path)
  elseif mode == "post" then
    return wrk.format("POST", path, json_headers, body)
  else
    -- One write in every ten requests, evenly spread.
    if counter % 10 == 0 then
      return wrk.format("POST", write_path, json_headers, write_body)
    end
    return wrk.format("GET", path)
  end
end

function response(status, headers, body)
  answered = answered + 1
  if answered >= limit then
    wrk.thread:stop()
  end
end

function done(summary, latency, requests)
  local e = summary.errors
  local errors = e.connect + e.read + e.write + e.status + e.timeout
  io.write(string.format(
    '{"requests": %d, "seconds": %.3f, "rps": %.1f, "p50_ms": %.3f, "p99_ms": %.3f, ' ..
    '"max_ms": %.3f, "errors": %d, "non_2xx": %d, "socket_errors": %d}\n',
    summary.requests, summary.duration / 1e6, summary.requests / (summary.duration / 1e6),
    latency:percentile(50) / 1000, latency:percentile(99) / 1000, latency.max / 1000,
    errors, e.status, e.connect + e.read + e.write + e.timeout))
end
