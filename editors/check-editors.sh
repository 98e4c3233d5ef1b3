#!/bin/sh
# Runs every editor check this machine can run: the keyword drift check (node), and the
# highlighting tests of the Vim syntax file (nvim, vim) and of the Emacs mode (emacs) when those
# editors are installed. Says which ran; exits non-zero if any that ran failed.
set -u
cd "$(dirname "$0")/.."
status=0

run() {
  name=$1
  shift
  if command -v "$1" >/dev/null 2>&1; then
    echo "== $name"
    "$@" || status=1
  else
    echo "== $name: skipped, $1 is not installed"
  fi
}

run "keyword lists (check-grammars.mjs)" node editors/check-grammars.mjs
run "Vim syntax in Neovim" nvim --headless -u NONE -i NONE -S editors/neovim/test/check_syntax.vim
run "Vim syntax in Vim" vim -N -u NONE -i NONE -Es -S editors/neovim/test/check_syntax.vim
run "Emacs costate-mode" emacs --batch -Q -l editors/emacs/test/costate-mode-test.el -f ert-run-tests-batch-and-exit
exit $status
