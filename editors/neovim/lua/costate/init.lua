-- costate for Neovim: the `costate` filetype and the language server `costate lsp`, started
-- with the built-in client, on Neovim 0.7 (Debian stable) through 0.11: `vim.lsp.start` where
-- it exists (0.8+), `vim.lsp.start_client` and `buf_attach_client` before. No plugin
-- dependencies.
--
--   require("costate").setup({
--     cmd = { "costate", "lsp" },                          -- or a full path to the binary
--     settings = { costate = { solveOnSave = true, solveIntervals = vim.NIL } },
--   })
--
-- `settings` is what the server reads (workspace/configuration and didChangeConfiguration,
-- section `costate`), the same keys as the VS Code extension's settings.

local M = {}

M.defaults = {
  cmd = { "costate", "lsp" },
  settings = {
    costate = {
      -- Solve each time a file is saved, so solver findings show up as diagnostics.
      solveOnSave = true,
      -- Override the file's `solve { intervals = N }`; vim.NIL keeps the file's value.
      solveIntervals = vim.NIL,
    },
  },
  -- Files that mark the root of a project; without one, the file's own directory is the root.
  root_markers = { ".git" },
}

-- The nearest folder upwards holding one of `markers`, else the file's own folder.
local function root_dir(bufnr, markers)
  local file = vim.api.nvim_buf_get_name(bufnr)
  local dir = vim.fn.fnamemodify(file, ":p:h")
  if vim.fs ~= nil and vim.fs.find ~= nil then
    local found = vim.fs.find(markers, { upward = true, path = dir })[1]
    return found and vim.fs.dirname(found) or dir
  end
  -- Neovim 0.7: no vim.fs; finddir/findfile search upwards with `;`.
  for _, marker in ipairs(markers) do
    local found = vim.fn.finddir(marker, dir .. ";")
    if found == "" then
      found = vim.fn.findfile(marker, dir .. ";")
    end
    if found ~= "" then
      return vim.fn.fnamemodify(vim.fn.fnamemodify(found, ":p"):gsub("/$", ""), ":h")
    end
  end
  return dir
end

-- Clients started on Neovim 0.7, one per root (vim.lsp.start does this bookkeeping on 0.8+).
local clients_by_root = {}

--- Starts (or reuses, per root) the costate server for buffer `bufnr`; returns the client id.
function M.start(bufnr, opts)
  opts = opts or M.options or M.defaults
  if vim.fn.executable(opts.cmd[1]) ~= 1 then
    vim.notify(
      ("costate: `%s` is not executable; install costate or set cmd in require('costate').setup()"):format(opts.cmd[1]),
      vim.log.levels.WARN
    )
    return nil
  end
  local config = {
    name = "costate",
    cmd = opts.cmd,
    root_dir = root_dir(bufnr, opts.root_markers),
    settings = opts.settings,
    -- The same values at initialisation, so the first solve honours them.
    init_options = opts.settings.costate,
  }
  if vim.lsp.start ~= nil then
    return vim.lsp.start(config, { bufnr = bufnr })
  end
  local id = clients_by_root[config.root_dir]
  local client = id and vim.lsp.get_client_by_id(id)
  if client == nil or client.is_stopped() then
    id = vim.lsp.start_client(config)
    if id == nil then
      return nil
    end
    clients_by_root[config.root_dir] = id
  end
  vim.lsp.buf_attach_client(bufnr, id)
  return id
end

function M.setup(opts)
  if vim.lsp.start == nil and vim.lsp.start_client == nil then
    vim.notify("costate: this Neovim has no built-in LSP client (0.7 or newer needed)", vim.log.levels.ERROR)
    return
  end
  M.options = vim.tbl_deep_extend("force", {}, M.defaults, opts or {})
  if vim.filetype ~= nil and vim.filetype.add ~= nil then
    vim.filetype.add({ extension = { costate = "costate" } })
  end
  local group = vim.api.nvim_create_augroup("costate_lsp", { clear = true })
  vim.api.nvim_create_autocmd("FileType", {
    group = group,
    pattern = "costate",
    callback = function(args)
      M.start(args.buf, M.options)
      M.show_results(args.buf)
    end,
  })
  vim.api.nvim_create_user_command("CostateSolution", M.show_solution, {
    desc = "Show the latest costate solution of this buffer as JSON",
  })
  vim.api.nvim_create_user_command("CostateSummary", M.show_summary, {
    desc = "Show the latest costate solve of this buffer in a floating window",
  })
  -- Buffers already open when setup() runs (e.g. `nvim file.costate` with a lazy plugin manager).
  for _, buf in ipairs(vim.api.nvim_list_bufs()) do
    if vim.api.nvim_buf_is_loaded(buf) and vim.bo[buf].filetype == "costate" then
      M.start(buf, M.options)
      M.show_results(buf)
    end
  end
end

--- What a solve leaves in the buffer, with no configuration: the end values as inlay hints
--- (Neovim 0.10+, which has them) and the lens on the `problem` line, refreshed when a solve
--- ends and on entering or writing the buffer (every version, 0.7 included).
function M.show_results(bufnr)
  if vim.lsp.inlay_hint ~= nil and vim.lsp.inlay_hint.enable ~= nil then
    -- 0.10 takes (enable, filter); 0.9's experimental API took (bufnr, enable).
    pcall(vim.lsp.inlay_hint.enable, true, { bufnr = bufnr })
  end
  if vim.lsp.codelens == nil then
    return
  end
  local group = vim.api.nvim_create_augroup("costate_lens_" .. bufnr, { clear = true })
  vim.api.nvim_create_autocmd({ "BufEnter", "BufWritePost", "InsertLeave", "CursorHold" }, {
    group = group,
    buffer = bufnr,
    callback = function()
      if M.client(bufnr) ~= nil then
        pcall(vim.lsp.codelens.refresh)
      end
    end,
  })
  -- A solve ends with the end of its progress: refresh then. (The server also asks clients
  -- that announce lens refreshes; Neovim before 0.10 does not.) Installed once, in front of
  -- whatever handler was there.
  if not M.progress_hooked then
    M.progress_hooked = true
    local previous = vim.lsp.handlers["$/progress"]
    vim.lsp.handlers["$/progress"] = function(err, result, ctx, config)
      local answer = previous and previous(err, result, ctx, config)
      local client = ctx and vim.lsp.get_client_by_id(ctx.client_id)
      if client and client.name == "costate" and result and result.value
          and result.value.kind == "end" then
        pcall(vim.lsp.codelens.refresh)
      end
      return answer
    end
  end
end

--- The lines of the floating summary for a solution document (docs/solution-format.md).
function M.summary_lines(doc)
  local lines = {
    ("**%s**: %s"):format(doc.problem or "?", doc.status or "?"),
    ("cost %s (%s)"):format(tostring(doc.cost), doc.sense or ""),
    ("end %s %s"):format(tostring(doc.end_time), (doc.time and doc.time.unit ~= vim.NIL and doc.time.unit) or ""),
    ("violation %s · %s iterations · %s intervals"):format(
      tostring(doc.max_violation), tostring(doc.iterations), tostring(doc.intervals)),
  }
  if doc.findings ~= nil and doc.findings ~= vim.NIL then
    for _, f in ipairs(doc.findings) do
      table.insert(lines, ("line %d: %s"):format(f.span.from.line, f.message))
    end
  end
  if doc.solved ~= true then
    table.insert(lines, "not a solution: the values are the last iterate")
  end
  return lines
end

--- `:CostateSummary`: the latest solve of the current buffer in a floating window.
function M.show_summary()
  local bufnr = vim.api.nvim_get_current_buf()
  M.request_solution(bufnr, function(result)
    vim.lsp.util.open_floating_preview(M.summary_lines(result), "markdown", { border = "single" })
  end)
end

--- The costate client attached to buffer `bufnr`, or nil (on every version from 0.7).
function M.client(bufnr)
  local clients
  if vim.lsp.get_clients ~= nil then
    clients = vim.lsp.get_clients({ bufnr = bufnr }) -- 0.10+
  else
    clients = vim.lsp.buf_get_clients(bufnr) -- 0.7 to 0.9
  end
  for _, c in pairs(clients) do
    if c.name == "costate" then
      return c
    end
  end
  return nil
end

--- Asks the server for the latest solution of buffer `bufnr` (the custom request
--- `costate/solution`) and calls `on_result` with the document; says why when there is none.
function M.request_solution(bufnr, on_result)
  local client = M.client(bufnr)
  if client == nil then
    vim.notify("costate: no costate server attached to this buffer", vim.log.levels.WARN)
    return
  end
  local params = { uri = vim.uri_from_bufnr(bufnr) }
  client.request("costate/solution", params, function(err, result)
    if err then
      vim.notify("costate/solution failed: " .. (err.message or vim.inspect(err)), vim.log.levels.ERROR)
      return
    end
    if result == nil or result == vim.NIL then
      vim.notify("costate: no solution yet; save the file to solve it", vim.log.levels.INFO)
      return
    end
    on_result(result)
  end, bufnr)
end

--- `:CostateSolution`: the latest solution document of the current buffer as JSON in a
--- scratch buffer.
function M.show_solution()
  M.request_solution(vim.api.nvim_get_current_buf(), function(result)
    vim.cmd("vnew")
    local out = vim.api.nvim_get_current_buf()
    vim.bo[out].buftype = "nofile"
    vim.bo[out].bufhidden = "wipe"
    vim.bo[out].filetype = "json"
    vim.api.nvim_buf_set_lines(out, 0, -1, false, vim.split(vim.json.encode(result), "\n"))
  end)
end

return M
