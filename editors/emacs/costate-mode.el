;;; costate-mode.el --- Major mode for costate optimal-control problem files -*- lexical-binding: t; -*-

;; Version: 0.1.0
;; Package-Requires: ((emacs "27.1"))
;; Keywords: languages
;; SPDX-License-Identifier: MIT

;;; Commentary:

;; Highlighting, comments and brace indentation for `*.costate' files, and an
;; `eglot-server-programs' entry that starts the costate language server
;; (`costate lsp').  Eglot is built into Emacs 29; on Emacs 27-28 install it
;; from GNU ELPA.  The word lists follow docs/language.md; the repository's
;; editors/check-grammars.mjs fails CI when one of them misses a word.
;;
;;   (add-to-list 'load-path "/path/to/costate/editors/emacs")
;;   (require 'costate-mode)
;;   (add-hook 'costate-mode-hook #'eglot-ensure)

;;; Code:

(defgroup costate nil
  "Editing costate optimal-control problem files."
  :group 'languages
  :prefix "costate-")

(defcustom costate-server-program '("costate" "lsp")
  "Command line that starts the costate language server."
  :type '(repeat string))

(defcustom costate-indent-offset 2
  "Indentation of entries inside a block, as `costate fmt' writes them."
  :type 'integer
  :safe #'integerp)

;; Keywords are contextual in costate: the item words start items, the
;; attribute words appear in declarations.  The regexps below match them in
;; those places only, like the parser.
(defconst costate-mode-block-keywords
  '("const" "param" "state" "control" "dynamics" "cost" "path" "boundary" "solve" "expect")
  "Items written `keyword { ... }'.")

(defconst costate-mode-line-keywords '("problem" "fn" "time")
  "Items written on one line: `problem NAME', `fn f(x) = ...', `time t ...'.")

(defconst costate-mode-attributes '("start" "end" "in" "guess" "scale" "free")
  "Declaration attributes; `start(x)' and `end(x)' are built-ins instead.")

(defconst costate-mode-other-keywords '("minimize" "maximize" "within")
  "The sense of a cost and the tolerance of an expectation.")

(defconst costate-mode-builtins
  '("sin" "cos" "tan" "asin" "acos" "atan" "atan2" "sinh" "cosh" "tanh" "exp" "log" "sqrt"
    "abs" "min" "max" "start" "end" "integral")
  "Built-in functions and special forms, highlighted before `('.")

(defconst costate-mode-constants '("pi")
  "Built-in constants.")

(defconst costate-mode-settings
  '("intervals" "integrator" "substeps" "control_shape" "tolerance" "iteration_limit"
    "time_limit" "hessian")
  "Keys of a `solve' block.")

(defconst costate-mode-setting-values '("rk4" "radau" "constant" "linear" "bfgs" "exact")
  "Named values of `solve' settings.")

(defvar costate-mode-syntax-table
  (let ((table (make-syntax-table)))
    ;; `//' starts a comment that ends with the line.
    (modify-syntax-entry ?/ ". 12" table)
    (modify-syntax-entry ?\n ">" table)
    (modify-syntax-entry ?_ "_" table)
    ;; `x'' is a derivative and there are no strings: both are punctuation.
    (modify-syntax-entry ?' "." table)
    (modify-syntax-entry ?\" "." table)
    (modify-syntax-entry ?% "." table)
    (modify-syntax-entry ?^ "." table)
    table)
  "Syntax table of `costate-mode'.")

(defun costate-mode--symbols (words)
  "A regexp matching one of WORDS as a whole symbol."
  (regexp-opt words 'symbols))

(defconst costate-mode-font-lock-keywords
  `(;; A `///' line on its own documents the next declaration; after code it is
    ;; an ordinary comment (the lexer decides the same way).
    ("^[ \t]*\\(///\\(?:[^/\n].*\\)?\\)$" 1 font-lock-doc-face t)
    (,(concat "^[ \t]*\\(" (costate-mode--symbols costate-mode-block-keywords) "\\)[ \t]*{")
     1 font-lock-keyword-face)
    (,(concat "^[ \t]*\\(\\_<problem\\_>\\)[ \t]+\\(\\_<[A-Za-z_][A-Za-z0-9_]*\\_>\\)")
     (1 font-lock-keyword-face) (2 font-lock-type-face))
    (,(concat "^[ \t]*\\(\\_<fn\\_>\\)[ \t]+\\(\\_<[A-Za-z_][A-Za-z0-9_]*\\_>\\)")
     (1 font-lock-keyword-face) (2 font-lock-function-name-face))
    (,(concat "^[ \t]*\\(\\_<time\\_>\\)[ \t]+\\(\\_<[A-Za-z_][A-Za-z0-9_]*\\_>\\)")
     (1 font-lock-keyword-face) (2 font-lock-variable-name-face))
    ;; Built-ins before attributes: text fontified once is not fontified again,
    ;; so `end(x)' keeps the built-in face.
    (,(concat "\\(" (costate-mode--symbols costate-mode-builtins) "\\)[ \t]*(")
     1 font-lock-builtin-face)
    (,(costate-mode--symbols costate-mode-attributes) . font-lock-keyword-face)
    (,(costate-mode--symbols costate-mode-other-keywords) . font-lock-keyword-face)
    (,(costate-mode--symbols costate-mode-constants) . font-lock-constant-face)
    (,(concat "^[ \t]*\\(" (costate-mode--symbols costate-mode-settings) "\\)[ \t]*=")
     1 font-lock-variable-name-face)
    (,(concat "=[ \t]*\\(" (costate-mode--symbols costate-mode-setting-values) "\\)")
     1 font-lock-constant-face)
    ;; Units in brackets: `[m/s^2]'.
    ("\\[[^]\n]*\\]" . font-lock-type-face)
    ;; `x'' on the left of a dynamics equation.
    ("\\_<\\([A-Za-z_][A-Za-z0-9_]*\\)'" 1 font-lock-variable-name-face)
    ;; Numbers: `12', `0.05', `1e-3', `2.5E+4'.
    ("\\_<[0-9]+\\(?:\\.[0-9]+\\)?\\(?:[eE][-+]?[0-9]+\\)?\\_>" . font-lock-constant-face))
  "Highlighting of `costate-mode'.")

(defun costate-indent-line ()
  "Indent the current line by the depth of its enclosing braces and brackets."
  (interactive)
  (let* ((depth (save-excursion (car (syntax-ppss (line-beginning-position)))))
         (closing (save-excursion
                    (back-to-indentation)
                    (memq (char-after) '(?\} ?\) ?\]))))
         (column (* costate-indent-offset (max 0 (- depth (if closing 1 0)))))
         (offset (- (current-column) (current-indentation))))
    (indent-line-to column)
    (when (> offset 0)
      (move-to-column (+ column offset)))))

;;;###autoload
(define-derived-mode costate-mode prog-mode "costate"
  "Major mode for costate optimal-control problem files."
  :syntax-table costate-mode-syntax-table
  (setq-local comment-start "// ")
  (setq-local comment-end "")
  (setq-local comment-start-skip "//+[ \t]*")
  (setq-local indent-line-function #'costate-indent-line)
  (setq-local indent-tabs-mode nil)
  (setq-local font-lock-defaults '(costate-mode-font-lock-keywords)))

;;;###autoload
(add-to-list 'auto-mode-alist '("\\.costate\\'" . costate-mode))

(with-eval-after-load 'eglot
  (defvar eglot-server-programs)
  ;; A function, so that a later change of `costate-server-program' is honoured.
  (add-to-list 'eglot-server-programs
               '(costate-mode . (lambda (&optional _interactive) costate-server-program))))

(provide 'costate-mode)

;;; costate-mode.el ends here
