" Plain runtime-path detection, for Vim and for Neovim set-ups that never call
" require("costate").setup().
autocmd BufRead,BufNewFile *.costate setfiletype costate
