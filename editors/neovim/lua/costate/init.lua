-- costate for Neovim: the `costate` filetype and the language server `costate lsp`, started
-- with the built-in client (vim.lsp.start, Neovim 0.8 or newer). No plugin dependencies.
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

local function root_dir(bufnr, markers)
  local file = vim.api.nvim_buf_get_name(bufnr)
  local dir = vim.fs.dirname(file)
  local found = vim.fs.find(markers, { upward = true, path = dir })[1]
  return found and vim.fs.dirname(found) or dir
end

--- Starts (or reuses, per root) the costate server for buffer `bufnr`.
function M.start(bufnr, opts)
  opts = opts or M.options or M.defaults
  if vim.fn.executable(opts.cmd[1]) ~= 1 then
    vim.notify(
      ("costate: `%s` is not executable; install costate or set cmd in require('costate').setup()"):format(opts.cmd[1]),
      vim.log.levels.WARN
    )
    return nil
  end
  return vim.lsp.start({
    name = "costate",
    cmd = opts.cmd,
    root_dir = root_dir(bufnr, opts.root_markers),
    settings = opts.settings,
    -- The same values at initialisation, so the first solve honours them.
    init_options = opts.settings.costate,
  }, { bufnr = bufnr })
end

function M.setup(opts)
  if vim.lsp.start == nil or vim.fs == nil then
    vim.notify("costate: Neovim 0.8 or newer is needed for vim.lsp.start", vim.log.levels.ERROR)
    return
  end
  M.options = vim.tbl_deep_extend("force", {}, M.defaults, opts or {})
  vim.filetype.add({ extension = { costate = "costate" } })
  local group = vim.api.nvim_create_augroup("costate_lsp", { clear = true })
  vim.api.nvim_create_autocmd("FileType", {
    group = group,
    pattern = "costate",
    callback = function(args)
      M.start(args.buf, M.options)
    end,
  })
  vim.api.nvim_create_user_command("CostateSolution", M.show_solution, {
    desc = "Show the latest costate solution of this buffer as JSON",
  })
  -- Buffers already open when setup() runs (e.g. `nvim file.costate` with a lazy plugin manager).
  for _, buf in ipairs(vim.api.nvim_list_bufs()) do
    if vim.api.nvim_buf_is_loaded(buf) and vim.bo[buf].filetype == "costate" then
      M.start(buf, M.options)
    end
  end
end

--- Asks the server for the latest solution of the current buffer (the custom request
--- `costate/solution`) and opens the JSON document in a scratch buffer; `nil` means none yet.
function M.show_solution()
  local bufnr = vim.api.nvim_get_current_buf()
  -- get_clients replaced get_active_clients in Neovim 0.10; accept both.
  local get_clients = vim.lsp.get_clients or vim.lsp.get_active_clients
  local client = get_clients({ bufnr = bufnr, name = "costate" })[1]
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
    vim.cmd("vnew")
    local out = vim.api.nvim_get_current_buf()
    vim.bo[out].buftype = "nofile"
    vim.bo[out].bufhidden = "wipe"
    vim.bo[out].filetype = "json"
    vim.api.nvim_buf_set_lines(out, 0, -1, false, vim.split(vim.json.encode(result), "\n"))
  end, bufnr)
end

return M
