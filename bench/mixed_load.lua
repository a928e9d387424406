-- wrk script: the mixed load of bench/soak.sh and tests/e2e/test_faults.sh (a Cora store
-- with a link and a label model).
-- weights out of 10: links predict 4, labels predict 2, links explain 1, labels explain 2,
-- metrics 1; Cora's nodes n0 .. n2707 drawn uniformly
local n = 2708
math.randomseed(11)
request = function()
    local r, a, b = math.random(1, 10), math.random(0, n - 1), math.random(0, n - 1)
    if r <= 4 then
        return wrk.format("GET", "/v1/links/predict?source=n" .. a .. "&k=10")
    elseif r <= 6 then
        return wrk.format("GET", "/v1/labels/predict?node=n" .. a)
    elseif r <= 7 then
        return wrk.format("GET", "/v1/links/explain?source=n" .. a .. "&target=n" .. b)
    elseif r <= 9 then
        return wrk.format("GET", "/v1/labels/explain?node=n" .. a)
    end
    return wrk.format("GET", "/metrics")
end
