-- A loop that never ends: --timeout stops it (exit code 2).
local n = 0
while true do n = n + 1 end
