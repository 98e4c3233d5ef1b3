-- A real editor end to end, set up exactly as editors/neovim/README.md says (the plugin on the
-- runtime path, `require("costate").setup(...)`): Neovim (0.7 or newer) opens a problem file
-- with an error, the plugin starts `costate lsp`, the script waits for the diagnostic, asks
-- for hover and completion, fixes the file, saves, and waits for the solve. Everything it received is written as JSON to
-- $COSTATE_NVIM_OUT for tests/editor_neovim.rs to check. Each wait has a timeout, and the
-- script always writes its output and quits, so a broken server fails the test, not hangs it.

local out_path = os.getenv("COSTATE_NVIM_OUT")
local problem = os.getenv("COSTATE_NVIM_FILE")
local costate = os.getenv("COSTATE_BIN")
local broken_line = tonumber(os.getenv("COSTATE_NVIM_BROKEN_LINE")) -- zero-based
local fixed_text = os.getenv("COSTATE_NVIM_FIXED_TEXT")
local plugin_dir = os.getenv("COSTATE_NVIM_PLUGIN")

local result = { errors = {} }
local latest_diagnostics = nil
local progress_end = nil

local function run()
  -- What the test observes goes through the global handlers, which every client uses.
  local publish = vim.lsp.handlers["textDocument/publishDiagnostics"]
  vim.lsp.handlers["textDocument/publishDiagnostics"] = function(err, params, ctx, config)
    latest_diagnostics = params
    return publish(err, params, ctx, config)
  end
  vim.lsp.handlers["$/progress"] = function(_, params)
    if params.value.kind == "end" then
      progress_end = params.value.message
    end
  end
  -- The README's set-up, verbatim but for the paths.
  vim.opt.runtimepath:append(plugin_dir)
  require("costate").setup({
    cmd = { costate, "lsp" },
    settings = { costate = { solveOnSave = true, solveIntervals = 20 } },
  })
  -- A user's configuration has filetype detection on (`-u NONE` leaves it off).
  vim.cmd("filetype plugin on")
  vim.cmd("edit " .. vim.fn.fnameescape(problem))
  local buf = vim.api.nvim_get_current_buf()
  local uri = vim.uri_from_bufnr(buf)
  local client = nil
  vim.wait(30000, function()
    client = require("costate").client(buf)
    return client ~= nil
  end, 20)
  if client == nil then
    table.insert(result.errors, "the plugin started no costate client")
    return
  end
  result.neovim = vim.version and tostring(vim.version().major .. "." .. vim.version().minor)

  local function wait(what, condition)
    if not vim.wait(120000, condition, 20) then
      table.insert(result.errors, "timed out waiting for " .. what)
      return false
    end
    return true
  end
  local function request(method, params)
    local response, err = client.request_sync(method, params, 60000, buf)
    if err then
      table.insert(result.errors, method .. ": " .. tostring(err))
      return nil
    end
    if response and response.err then
      table.insert(result.errors, method .. ": " .. vim.inspect(response.err))
    end
    return response and response.result
  end

  wait("the first diagnostics", function()
    return latest_diagnostics ~= nil and #latest_diagnostics.diagnostics > 0
  end)
  result.diagnostics_before = latest_diagnostics and latest_diagnostics.diagnostics

  local line = vim.api.nvim_buf_get_lines(buf, broken_line, broken_line + 1, false)[1]
  -- Hover on the state being differentiated, completion right after `= ` on the broken line.
  result.hover = request("textDocument/hover", {
    textDocument = { uri = uri },
    position = { line = broken_line, character = 2 },
  })
  result.completion = request("textDocument/completion", {
    textDocument = { uri = uri },
    position = { line = broken_line, character = #line },
  })

  vim.api.nvim_buf_set_lines(buf, broken_line, broken_line + 1, false, { fixed_text })
  wait("the diagnostics to clear", function()
    return latest_diagnostics ~= nil and #latest_diagnostics.diagnostics == 0
  end)
  result.diagnostics_after = latest_diagnostics and latest_diagnostics.diagnostics
  vim.cmd("write")
  wait("the solve to finish", function()
    return progress_end ~= nil
  end)
  result.progress_end = progress_end
  result.solution = request("costate/solution", { uri = uri })
  result.code_lens = request("textDocument/codeLens", { textDocument = { uri = uri } })
  -- What the plugin shows by itself: the lens, refreshed when the server asks.
  wait("the plugin's lens to show the solve", function()
    for _, lens in ipairs(vim.lsp.codelens.get(buf) or {}) do
      if lens.command and lens.command.title:find("solved", 1, true) then
        result.shown_lens = lens.command.title
        return true
      end
    end
    return false
  end)
  -- :CostateSummary opens a floating window.
  vim.cmd("CostateSummary")
  wait("the summary window", function()
    for _, win in ipairs(vim.api.nvim_list_wins()) do
      if vim.api.nvim_win_get_config(win).relative ~= "" then
        result.summary = vim.api.nvim_buf_get_lines(vim.api.nvim_win_get_buf(win), 0, -1, false)
        return true
      end
    end
    return false
  end)
  vim.lsp.stop_client(client.id)
end

local ok, err = pcall(run)
if not ok then
  table.insert(result.errors, "script error: " .. tostring(err))
end
local file = io.open(out_path, "w")
file:write(vim.fn.json_encode(result))
file:close()
vim.cmd("qa!")
