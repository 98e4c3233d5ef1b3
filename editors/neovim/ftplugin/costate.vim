" Buffer settings for costate files: `//` comments (`///` documents a declaration) and the
" formatter's two-space indentation, so manual edits match `costate fmt`.
if exists("b:did_ftplugin")
  finish
endif
let b:did_ftplugin = 1

setlocal commentstring=//\ %s
setlocal comments=:///,://
setlocal formatoptions-=t formatoptions+=croql
setlocal expandtab shiftwidth=2 softtabstop=2
" smartindent rather than cindent: cindent would treat `sway:` as a C label and every line
" without `;` as a continuation.
setlocal autoindent smartindent cinwords=

let b:undo_ftplugin = "setlocal commentstring< comments< formatoptions< expandtab< shiftwidth< softtabstop< autoindent< smartindent< cinwords<"
